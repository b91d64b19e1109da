"""Products of discrete Fourier transforms for groups too wide to convolve directly.

Convolution modulo ``size`` is exact arithmetic on the residues of the total:
folding every chunk modulo the window size and multiplying their transforms
gives the distribution of ``total mod size``. Because the window was chosen to
hold all but ``2 * TAIL`` of the mass (``lattice.tail_window``), reading residue
``j`` as the total ``lo + j`` is wrong by at most that mass.
"""

from __future__ import annotations

import numpy as np

from .recursion import fill_chunks

#: Rows of chunks transformed at once (bounds memory to BLOCK x size doubles).
BLOCK = 64


def chunk_width(size: int) -> int:
    """Support width of one chunk: narrow enough that the direct recursion is
    cheap, wide enough that few transforms are needed."""
    return max(64, size // 8)


def tidy(pmf: np.ndarray) -> np.ndarray:
    """Clip the transform's rounding noise (about 1e-17) below zero and renormalise."""
    np.maximum(pmf, 0.0, out=pmf)
    return pmf / pmf.sum()


def fold_group(offset, frac, prob, lo: int, size: int) -> np.ndarray:
    """Distribution of one group's lattice total on indices ``lo .. lo + size - 1``."""
    width = chunk_width(size)
    block = max(1, min(BLOCK, (1 << 22) // size))
    rows = np.zeros((block, size))
    spectrum = None
    i = 0
    while i < len(offset):
        rows[:] = 0.0
        i, used = fill_chunks(offset, frac, prob, i, size, width, rows)
        part = np.prod(np.fft.rfft(rows[:used], axis=1), axis=0)
        spectrum = part if spectrum is None else spectrum * part
    # Residue r holds the totals r, r + size, ...; the one in the window is
    # lo + ((r - lo) mod size), so position j of the result is residue lo + j.
    return tidy(np.roll(np.fft.irfft(spectrum, n=size), -(lo % size)))
