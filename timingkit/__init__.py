"""timingkit: pulsar timing from arrival times to a fitted timing model.

Public entry points live in the submodules; the most used are re-exported
lazily here so ``import timingkit`` stays fast.
"""

__version__ = "0.1.0"
