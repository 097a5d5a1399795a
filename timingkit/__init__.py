"""timingkit: pulsar timing from arrival times to a fitted timing model.

The package is laid out by stage, each folder importing only from the ones
before it: numerics, formats, geometry, model, predict, fit, glitch,
profiles, physics, outputs, pipeline, batch, cli (DEVELOPERS.md has the
module map). The most
used entry points::

    from timingkit.pipeline import fit_files, load_inputs
    from timingkit.batch import discover_sources, run_batch

Folders name what they offer in their ``__init__``; those names are
imported on first use, so ``import timingkit`` stays fast.
"""

__version__ = "0.1.0"


def lazy_exports(package: str, table: dict[str, str]):
    """``__getattr__`` and ``__dir__`` for a package whose public names live in
    its modules: ``table`` maps name -> module (relative to ``package``); the
    module is imported the first time the name is asked for."""
    import importlib

    def __getattr__(name):
        if name not in table:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        return getattr(importlib.import_module(f"{package}.{table[name]}"), name)

    def __dir__():
        return sorted(table)

    return __getattr__, __dir__
