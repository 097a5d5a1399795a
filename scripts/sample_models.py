"""The invented sample sources and the one model template the scripts write
them with (make_sample_data.py, bench.py, bench_batch.py, bench_glitches.py).

None of these is a real pulsar: frequencies, spin-down, dispersion measures,
positions (and, in bench_binary.py, orbits) were chosen at least a few per
cent away from every published pulsar the authors know, with positions away
from famous ones. Each keeps a familiar character: a millisecond pulsar, a
young pulsar of tens of milliseconds with a large spin-down (and a second
derivative), and a slow pulsar of 1.7 s.
"""

from __future__ import annotations

SPIN_AND_DM = ("spin.frequency_hz", "spin.frequency_derivatives.0", "dispersion.dm")
YOUNG_FREE = SPIN_AND_DM[:2] + ("spin.frequency_derivatives.1", "dispersion.dm")

# Position lines (TOML) of each invented source.
MSP_POSITION = ('ra = "13h21m09.4712836s"\ndec = "+41d06m38.20419s"\n'
                "pm_ra_cosdec_mas_per_yr = 6.2\npm_dec_mas_per_yr = -9.8\nparallax_mas = 0.87")
YOUNG_POSITION = 'ra = "07h41m27.392s"\ndec = "-03d26m51.48s"'
SLOW_POSITION = 'ra = "04h52m17.63s"\ndec = "+37d48m52.1s"'

# True spin and DM (the TOAs are simulated from these) and the deliberately
# imperfect starting values the demo fits from; decimal strings, read exactly.
MSP_TRUE = dict(frequency_hz="401.73512046873159", frequency_derivatives=["-8.214e-16"],
                dm="17.9327")
MSP_START = dict(frequency_hz="401.735120468728", frequency_derivatives=["-8.20e-16"],
                 dm="17.95")
YOUNG_TRUE = dict(frequency_hz="18.473162904173582641",
                  frequency_derivatives=["-2.2068e-11", "6.2e-23"], dm="187.31")
YOUNG_START = dict(frequency_hz="18.4731629041", frequency_derivatives=["-2.20675e-11", "6.0e-23"],
                   dm="187.25")
SLOW_TRUE = dict(frequency_hz="0.58743018265417", frequency_derivatives=["-1.0873e-15"],
                 dm="143.62")
SLOW_START = dict(frequency_hz="0.587430182653", frequency_derivatives=["-1.05e-15"], dm="143.3")


def model_text(name: str, position: str, frequency_hz, frequency_derivatives, dm, *,
               free=SPIN_AND_DM, epoch_mjd: str = "59000", sites: str | None = "sites.toml") -> str:
    """TOML of one invented source: ``position`` holds the [position] lines
    (its epoch is added), the spin and DM values are written as given (use
    decimal strings for exact values); ``sites`` names the site file, or None."""
    derivatives = ", ".join(f'"{d}"' for d in frequency_derivatives)
    free_list = ", ".join(f'"{p}"' for p in free)
    text = f"""name = "{name}"

[position]
{position}
epoch_mjd = "{epoch_mjd}"

[spin]
epoch_mjd = "{epoch_mjd}"
frequency_hz = "{frequency_hz}"
frequency_derivatives = [{derivatives}]

[dispersion]
dm = {dm}
epoch_mjd = "{epoch_mjd}"

[fit]
free = [{free_list}]
"""
    if sites is not None:
        text += f'\n[settings]\nsites = "{sites}"\n'
    return text
