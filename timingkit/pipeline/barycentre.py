"""Per-TOA time scales and delays as a table (``timingkit barycentre``)."""

from __future__ import annotations



from timingkit.formats import csv_columns
from timingkit.formats.atomic_file import atomic_write_text
from timingkit.formats.atomic_file import refuse_output_over_inputs, writing_error
from timingkit.pipeline.inputs import Inputs, load_inputs


BARYCENTRE_COLUMNS = ["mjd", "site", "freq_mhz", "tdb_mjd", "roemer_s", "shapiro_s",
                      "dispersion_s", "binary_s", "barycentric_mjd"]


def barycentre_rows(inputs: Inputs):
    """Per-TOA time scales and delays (DESIGN.md §5 columns): arrays, and ``tdb`` (SplitTime)."""
    ev = inputs.model.evaluate(inputs.obs)
    obs = inputs.obs
    total = ev.roemer_s - ev.shapiro_s - ev.dispersion_s - ev.other_delay_s - ev.binary_s
    return {
        "mjd": obs.toas.mjd_text, "site": obs.site_names, "freq_mhz": obs.toas.freq_mhz,
        "tdb": obs.tdb, "roemer_s": ev.roemer_s, "shapiro_s": ev.shapiro_s,
        "dispersion_s": ev.dispersion_s, "binary_s": ev.binary_s, "total_delay_s": total,
    }


def barycentre_files(toas_path, model_path, csv_path=None, *, sites_paths=(), ephemeris=None,
                     clock_paths=()) -> str:
    """Write the barycentring table to ``csv_path`` (or return it as text)."""
    inputs = load_inputs(toas_path, model_path, sites_paths=sites_paths, ephemeris=ephemeris,
                         clock_paths=clock_paths)
    from timingkit.outputs.folder_lock import lock_output, refuse_if_locked
    if csv_path is not None:
        refuse_output_over_inputs(csv_path, inputs.paths)
        refuse_if_locked(csv_path, field="output")
    rows = barycentre_rows(inputs)
    obs = inputs.obs
    # whole columns at once (timingkit.formats.csv_columns); delays in s with 12 decimals
    # (ps) for the Roemer delay and 15 (fs) for the smaller ones, MJDs with 15 decimals
    bary = obs.tdb.add_seconds(rows["total_delay_s"])
    columns = [csv_columns.text(rows["mjd"]), csv_columns.text(rows["site"]),
               csv_columns.shortest_repr(rows["freq_mhz"]),
               csv_columns.split_mjd(obs.tdb.day, obs.tdb.frac, 15),
               csv_columns.fixed_point(rows["roemer_s"], 12),
               csv_columns.fixed_point(rows["shapiro_s"], 15),
               csv_columns.fixed_point(rows["dispersion_s"], 15),
               csv_columns.fixed_point(rows["binary_s"], 15),
               csv_columns.split_mjd(bary.day, bary.frac, 15)]
    text = csv_columns.csv_bytes(BARYCENTRE_COLUMNS, columns).decode("utf-8")
    if csv_path is not None:
        with lock_output(csv_path, field="output"):
            try:
                atomic_write_text(csv_path, text)
            except OSError as exc:
                raise writing_error(exc, csv_path) from None
    return text
