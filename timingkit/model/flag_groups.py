"""Which TOAs a flag group takes (``[[time_offset]]``, ``[[white_noise]]``).

A group names a TOA-table column (``flag``) and a ``value`` and takes the TOAs
whose column holds that value. ``flag = "site"`` takes the TOAs at that site
under any of its names (the name or one of its ``other_names``, any case) when
it is given the prepared observations, which know the sites
(``Observations.site_labels``); given a bare TOA table it takes the TOAs whose
site is written exactly as ``value``.
"""

from __future__ import annotations

import numpy as np

SITE_FLAG = "site"


def toa_table_of(data):
    """The TOA table of ``data`` (a ToaTable, or Observations holding one)."""
    return getattr(data, "toas", data)


def group_mask(data, flag: str, value: str) -> np.ndarray | None:
    """TOAs of the group (bool per TOA), or None when the table has no column
    ``flag``. ``data``: Observations (site groups match every name of the site)
    or a ToaTable (site groups match the name as written)."""
    toas = toa_table_of(data)
    if flag == SITE_FLAG:
        written = np.asarray(toas.site) == value
        labels = getattr(data, "site_labels", None) or {}
        site = labels.get(str(value).strip().lower())
        if site is None:
            return written
        return written | (np.asarray(data.site_names) == site)
    column = toas.flags.get(flag)
    return None if column is None else np.asarray(column == value, dtype=bool)


__all__ = ["SITE_FLAG", "group_mask", "toa_table_of"]
