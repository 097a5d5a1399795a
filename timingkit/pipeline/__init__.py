"""From files to results: the functions the command line and the batch runner call.

- ``inputs``: :func:`load_inputs` (read, check and barycentre one source).
- ``fit_run``: :func:`fit_files` and :func:`residual_files` (fit or evaluate, write outputs).
- ``barycentre``: :func:`barycentre_files` (per-TOA time scales and delays as CSV).
- ``glitch_run``: :func:`glitch_files` (glitch search and fit, same signature as fit_files).
- ``event_run``: :func:`fold_event_files`, :func:`event_toa_files` and
  :func:`simulate_event_file` (photon events: fold and test, event TOAs, simulated lists).
- ``obsgeo_site``: :func:`obsgeo_observer` (an event list's OBSGEO-X/Y/Z position matched to
  the site its OBSERVAT/TELESCOP names, within 100 m).
- ``left_out``: :func:`choose_toas` (exclusion lists and rules) and the left-out TOAs' residuals.

::

    from timingkit.pipeline import fit_files
    report = fit_files("psr.toas", "psr.toml", "out/")
"""

from timingkit import lazy_exports

EXPORTS = {
    "fit_files": "fit_run", "residual_files": "fit_run", "write_fit_outputs": "fit_run",
    "load_inputs": "inputs", "load_model": "inputs", "Inputs": "inputs", "barycentre_files":
    "barycentre", "glitch_files": "glitch_run", "fold_event_files": "event_run",
    "event_toa_files": "event_run", "simulate_event_file": "event_run",
    "choose_toas": "left_out", "obsgeo_observer": "obsgeo_site",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
