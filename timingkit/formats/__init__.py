"""Readers and writers of the project's own files, and the errors they raise.

- ``errors``: :class:`InputError` (file, line, field) and :class:`FitError`.
- ``safe_read``: regular files only, with size limits (a device or FIFO is refused).
- ``textfile``: the one text-file reader (encoding, size, line errors) and TOML reader
  (syntax errors with their line), used by the model, site and batch-manifest files.
- ``atomic_file``: one output file written atomically, with the user's umask.
- ``mjd_text``: exact decimal MJD text <-> whole day + fraction.
- ``toa_table``, ``toa_reader``, ``toa_writer``: the TOA table (:class:`ToaTable`).
- ``model_file``: the TOML model file (exact decimals, key validation, atomic writes).
- ``site_file``: :class:`Site` records and site files; the built-in ``geocentre`` and ``ssb``.
- ``clock_table``: clock-correction tables.
- ``predictor_file``: phase-predictor files (JSON Chebyshev segments).
- ``window_file``: observing-window files (start and end MJD per line) for predictors.
- ``profile_file``: folded-profile and template files (.npz); ``profile_fits``: folded
  profiles (one binary table per observation) and templates in our FITS layout.
- ``quantities``: astropy quantities and times from Python callers, converted or refused.
- ``ogip_time``: the OGIP timing keywords of a FITS table (MJDREF, TIMEZERO, TIMESYS, ...).
- ``event_list``, ``event_fits``, ``event_text``: photon event lists (:class:`EventList`;
  OGIP FITS and plain text), GTI and energy selection, phases.fits and simulated lists.
- ``orbit_table``: spacecraft orbit tables (:class:`OrbitTable`; text or FITS).
- ``toa_selection``: rules that choose TOAs (``mjd=58000..58500``, ``err_us>5``, ...).
- ``exclusion_list``: lists of TOAs left out of a fit (line, exact MJD, reason; rules).
- ``csv_columns``: whole-column CSV formatting for large tables (exact ``%.Nf``).
"""

from timingkit import lazy_exports

EXPORTS = {
    "InputError": "errors", "FitError": "errors", "ToaTable": "toa_table", "read_toa_table":
    "toa_reader", "write_toa_table": "toa_writer", "read_model_document": "model_file",
    "Site": "site_file", "load_site_file": "site_file", "ClockTable": "clock_table",
    "read_clock_table": "clock_table", "csv_bytes": "csv_columns",
    "read_predictor_file": "predictor_file",
    "write_predictor_file": "predictor_file", "ProfileSet": "profile_file",
    "read_profile_file": "profile_file", "write_profile_file": "profile_file",
    "read_profile_sets": "profile_file", "read_profile_fits": "profile_fits",
    "write_profile_fits": "profile_fits", "read_window_file": "window_file",
    "read_text_file": "textfile", "read_toml_file": "textfile", "EventList": "event_list",
    "read_event_list": "event_list", "select_events": "event_list", "OrbitTable": "orbit_table",
    "read_orbit_table": "orbit_table",
    "parse_rule": "toa_selection", "read_exclusion_list": "exclusion_list",
    "format_exclusion_list": "exclusion_list",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
