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

def model_text(name: str, position: str, derivatives: int, free: list[str]) -> str:
    """TOML of an invented source; {f0}, {f1}, {f2}, {dm} are filled in later."""
    derivs = ", ".join(f'"{{f{k}}}"' for k in range(1, derivatives + 1))
    free_list = ", ".join(f'"{p}"' for p in free)
    return f"""name = "{name}"

[position]
{position}
epoch_mjd = "59000"

[spin]
epoch_mjd = "59000"
frequency_hz = "{{f0}}"
frequency_derivatives = [{derivs}]

[dispersion]
dm = {{dm}}
epoch_mjd = "59000"

[fit]
free = [{free_list}]

[settings]
sites = "sites.toml"
"""


SPIN_DM = ["spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm"]

SOURCES = {
    # a binary-free millisecond pulsar, three frequencies, two sites
    "demo-msp": dict(
        model=model_text("demo-msp", 'ra = "17h53m20.1234567s"\ndec = "-07d41m12.345678s"\n'
                         "pm_ra_cosdec_mas_per_yr = -3.1\npm_dec_mas_per_yr = 4.7\n"
                         "parallax_mas = 0.9", 1, SPIN_DM),
        true=dict(f0="287.45612387654321", f1="-6.1234e-16", dm="24.5631"),
        start=dict(f0="287.456123876540", f1="-6.10e-16", dm="24.58"),
        simulate=["--start", "58500", "--end", "60300", "--count", "360", "--error-us", "0.8",
                  "--site", "desert-dish", "--site", "lake-array",
                  "--freq-mhz", "820", "1400", "2300", "--flag", "backend=wide-a,wide-b"]),
    # a young pulsar with a large spin-down and a second derivative
    "demo-young": dict(
        model=model_text("demo-young", 'ra = "05h12m33.4567s"\ndec = "+21d02m11.234s"', 2,
                         SPIN_DM[:2] + ["spin.frequency_derivatives.1", "dispersion.dm"]),
        true=dict(f0="29.946923012345678901", f1="-3.77535e-10", f2="1.1147e-20", dm="56.77"),
        start=dict(f0="29.9469230123", f1="-3.775345e-10", f2="1.10e-20", dm="56.70"),
        simulate=["--start", "58800", "--end", "59200", "--count", "240", "--error-us", "25",
                  "--site", "north-ridge", "--freq-mhz", "610", "1400"]),
    # a slow, old pulsar
    "demo-slow": dict(
        model=model_text("demo-slow", 'ra = "19h03m45.11s"\ndec = "+44d17m09.8s"', 1, SPIN_DM),
        true=dict(f0="0.71234567890123", f1="-2.345e-15", dm="112.3"),
        start=dict(f0="0.712345678900", f1="-2.30e-15", dm="112.0"),
        simulate=["--start", "58600", "--end", "60100", "--count", "150", "--error-us", "300",
                  "--site", "desert-dish", "--freq-mhz", "350", "1400"]),
}


def main() -> int:
    os.makedirs(DATA, exist_ok=True)
    for seed, (name, spec) in enumerate(SOURCES.items(), start=11):
        true_path = os.path.join(DATA, f"{name}.true.toml")
        start_path = os.path.join(DATA, f"{name}.toml")
        toas_path = os.path.join(DATA, f"{name}.toas")
        with open(true_path, "w") as fh:
            fh.write("# the model the TOAs were simulated from (invented source)\n")
            fh.write(spec["model"].format(**spec["true"]))
        with open(start_path, "w") as fh:
            fh.write("# deliberately imperfect starting model for the demo (invented source)\n")
            fh.write(spec["model"].format(**spec["start"]))
        cmd = [sys.executable, "-m", "timingkit", "simulate", true_path, *spec["simulate"],
               "--seed", str(seed), "-o", toas_path]
        subprocess.run(cmd, check=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
