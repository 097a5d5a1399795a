"""Per-TOA time scales and delays as a table (``timingkit barycentre``)."""

from __future__ import annotations



from timingkit.formats.model_file import atomic_write_text
from timingkit.pipeline.inputs import Inputs, load_inputs


BARYCENTRE_COLUMNS = ["mjd", "site", "freq_mhz", "tdb_mjd", "roemer_s", "shapiro_s",
                      "dispersion_s", "binary_s", "barycentric_mjd"]


def barycentre_rows(inputs: Inputs):
    """Per-TOA time scales and delays (DESIGN.md §5 columns)."""
    ev = inputs.model.evaluate(inputs.obs)
    obs = inputs.obs
    total = ev.roemer_s - ev.shapiro_s - ev.dispersion_s - ev.other_delay_s - ev.binary_s
    bary = obs.tdb.add_seconds(total)
    return {
        "mjd": obs.toas.mjd_text, "site": obs.site_names, "freq_mhz": obs.toas.freq_mhz,
        "tdb_mjd": obs.tdb.mjd_strings(15), "roemer_s": ev.roemer_s, "shapiro_s": ev.shapiro_s,
        "dispersion_s": ev.dispersion_s, "binary_s": ev.binary_s,
        "barycentric_mjd": bary.mjd_strings(15),
    }


def barycentre_files(toas_path, model_path, csv_path=None, *, sites_paths=(), ephemeris=None,
                     clock_paths=()) -> str:
    """Write the barycentring table to ``csv_path`` (or return it as text)."""
    inputs = load_inputs(toas_path, model_path, sites_paths=sites_paths, ephemeris=ephemeris,
                         clock_paths=clock_paths)
    rows = barycentre_rows(inputs)
    # one %-format per row: ~4x faster than csv.writer for 1e5-1e6 rows, and the
    # fields are plain (no quoting needed: site names and MJDs have no commas)
    fmt = "%s,%s,%r,%s,%.12f,%.15e,%.15e,%.15e,%s"
    lines = [",".join(BARYCENTRE_COLUMNS)]
    lines.extend(fmt % row for row in zip(
        rows["mjd"], rows["site"], rows["freq_mhz"].tolist(), rows["tdb_mjd"],
        rows["roemer_s"].tolist(), rows["shapiro_s"].tolist(), rows["dispersion_s"].tolist(),
        rows["binary_s"].tolist(), rows["barycentric_mjd"]))
    text = "\n".join(lines) + "\n"
    if csv_path is not None:
        atomic_write_text(csv_path, text)
    return text
