"""Many sources at once, on a process pool or a Dask cluster.

- ``sources``: :class:`Source` records from a directory or a manifest (:func:`discover_sources`).
- ``runner``: :func:`run_batch` (atomic per-source folders, failures contained, resume).
- ``fingerprint``: content hashes for ``--resume``.
- ``outcomes``: :class:`BatchResult` and per-source outcomes.
- ``summary``: summary.csv, summary.json, the P-Pdot diagram and the overview page.
- ``worker_guard``: workers that end with the batch; ``outputs.sha256`` for resume.

::

    from timingkit.batch import discover_sources, run_batch
    result = run_batch(discover_sources("sources/"), "batch_out", workers=4, resume=True)
"""

from timingkit import lazy_exports

EXPORTS = {
    "run_batch": "runner", "discover_sources": "sources", "read_manifest": "sources",
    "Source": "sources", "BatchResult": "outcomes",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
