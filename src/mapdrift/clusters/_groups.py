"""Group periods that have the same units with values, so random draws can be shared."""

from __future__ import annotations

import numpy as np

__all__ = ["period_groups"]


def period_groups(values: np.ndarray) -> list[tuple[np.ndarray, list[int]]]:
    """``[(mask of units with a value, [period columns]), ...]`` in order of first period.

    Periods whose set of non-missing units is identical share a group (the common case: a
    complete panel is one group).
    """
    valid = ~np.isnan(np.asarray(values, dtype=np.float64))
    groups: dict[bytes, tuple[np.ndarray, list[int]]] = {}
    for t in range(valid.shape[1]):
        key = np.packbits(valid[:, t]).tobytes()
        if key not in groups:
            groups[key] = (valid[:, t].copy(), [])
        groups[key][1].append(t)
    return list(groups.values())
