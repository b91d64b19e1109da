"""The Wilson score interval of a proportion (Wilson, JASA 22, 1927), written once.

For ``k`` successes in ``n`` trials (share ``s = k / n``) and the normal
quantile ``z`` of the level, the interval is ``centre +/- half`` with

    centre = (s + z^2 / 2n) / (1 + z^2 / n),
    half   = z / (1 + z^2 / n) * sqrt(s (1 - s) / n + z^2 / 4n^2).

Its centre is pulled towards 1/2 and it never leaves [0, 1], unlike the
normal ("Wald") interval. Used by ``outcome_bands_ci`` (simulated bands),
``wilson_interval`` (the reliability table) and ``outcome_error`` (the widest
interval of a simulated outcome, at s = 1/2).
"""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy.special import ndtri

#: The 97.5% point of the standard normal distribution (95% two-sided).
Z95 = 1.959963984540054


@njit(cache=True, nogil=True)
def wilson_centre_half(share, trials, z):
    """``(centre, half)`` of the Wilson interval; scalars or arrays alike."""
    z2 = z * z
    denom = 1.0 + z2 / trials
    centre = (share + z2 / (2.0 * trials)) / denom
    half = z / denom * np.sqrt(share * (1.0 - share) / trials + z2 / (4.0 * trials * trials))
    return centre, half


def wilson(share, trials, level: float):
    """``(lo, hi)`` arrays of the Wilson interval at two-sided ``level`` (a scalar or an
    array per row)."""
    share = np.asarray(share, dtype=np.float64)
    n = np.asarray(trials, dtype=np.float64)
    z = ndtri(0.5 + np.asarray(level, dtype=np.float64) / 2.0)
    centre, half = wilson_centre_half(share, n, np.broadcast_to(z, share.shape).astype(np.float64))
    # the share always lies inside (mathematically); keep it so where floats round past it
    return (np.clip(np.minimum(centre - half, share), 0.0, 1.0),
            np.clip(np.maximum(centre + half, share), 0.0, 1.0))
