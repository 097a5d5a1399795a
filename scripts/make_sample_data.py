#!/usr/bin/env python
"""Regenerate timingkit/sample_data/: three invented pulsars at invented sites.

Each source gets the true model (``*.true.toml``, kept for reference), a TOA
table simulated from it with ``timingkit simulate``, and a deliberately
imperfect starting model (``*.toml``) that the demo then fits. Run from the
repository root:  python scripts/make_sample_data.py
"""

from __future__ import annotations

import os
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "timingkit", "sample_data")
sys.path.insert(0, HERE)

from sample_models import (MSP_POSITION, MSP_START, MSP_TRUE, SLOW_POSITION,  # noqa: E402
                           SLOW_START, SLOW_TRUE, SPIN_AND_DM, YOUNG_FREE, YOUNG_POSITION,
                           YOUNG_START, YOUNG_TRUE, model_text)

SOURCES = {
    # a binary-free millisecond pulsar, three frequencies, two sites
    "demo-msp": dict(
        position=MSP_POSITION, free=SPIN_AND_DM, true=MSP_TRUE, start=MSP_START,
        simulate=["--start", "58500", "--end", "60300", "--count", "360", "--error-us", "0.8",
                  "--site", "desert-dish", "--site", "lake-array",
                  "--freq-mhz", "820,1400,2300", "--flag", "backend=wide-a,wide-b"]),
    # a young pulsar with a large spin-down and a second derivative
    "demo-young": dict(
        position=YOUNG_POSITION, free=YOUNG_FREE, true=YOUNG_TRUE, start=YOUNG_START,
        simulate=["--start", "58800", "--end", "59200", "--count", "240", "--error-us", "25",
                  "--site", "north-ridge", "--freq-mhz", "610,1400"]),
    # a slow, old pulsar
    "demo-slow": dict(
        position=SLOW_POSITION, free=SPIN_AND_DM, true=SLOW_TRUE, start=SLOW_START,
        simulate=["--start", "58600", "--end", "60100", "--count", "150", "--error-us", "300",
                  "--site", "desert-dish", "--freq-mhz", "350,1400"]),
}


def main() -> int:
    os.makedirs(DATA, exist_ok=True)
    for seed, (name, spec) in enumerate(SOURCES.items(), start=11):
        true_path = os.path.join(DATA, f"{name}.true.toml")
        start_path = os.path.join(DATA, f"{name}.toml")
        toas_path = os.path.join(DATA, f"{name}.toas")
        with open(true_path, "w") as fh:
            fh.write("# the model the TOAs were simulated from (invented source)\n")
            fh.write(model_text(name, spec["position"], **spec["true"], free=spec["free"]))
        with open(start_path, "w") as fh:
            fh.write("# deliberately imperfect starting model for the demo (invented source)\n")
            fh.write(model_text(name, spec["position"], **spec["start"], free=spec["free"]))
        cmd = [sys.executable, "-m", "timingkit", "simulate", true_path, *spec["simulate"],
               "--seed", str(seed), "-o", toas_path]
        subprocess.run(cmd, check=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
