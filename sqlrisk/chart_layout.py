"""Where the words go on a chart: text boxes estimated from font size, and label placement
that keeps every label off the curve, off the other labels and inside the plot.

Pure geometry in pixels (y up), no drawing library: ``chart_drawing`` asks for a place,
and the tests check the same boxes (and the boxes the renderer actually drew).

The cut labels of an exceedance curve P(total >= x) have a free corner by construction:
the curve never rises, so above and to the right of a point on it lies only empty plot
(and below and to the left, only area under it). ``place_one`` tries those corners
first, then further along the same diagonal, so labels stack instead of colliding.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Mean advance of a DejaVu Sans glyph (matplotlib's bundled font) in em: digits are
#: 0.636 em, lower-case letters 0.5-0.65 (from the font's metrics); rounded up.
CHAR_EM = 0.64
#: Line height in em (matplotlib's default linespacing is 1.2).
LINE_EM = 1.25


@dataclass(frozen=True)
class Box:
    """An axis-aligned rectangle in pixels, y up."""

    x0: float
    y0: float
    x1: float
    y1: float

    def overlaps(self, other: "Box", pad: float = 0.0) -> bool:
        return (self.x0 - pad < other.x1 and other.x0 - pad < self.x1
                and self.y0 - pad < other.y1 and other.y0 - pad < self.y1)

    def inside(self, frame: "Box") -> bool:
        return (self.x0 >= frame.x0 and self.x1 <= frame.x1
                and self.y0 >= frame.y0 and self.y1 <= frame.y1)

    def grown(self, pad: float) -> "Box":
        return Box(self.x0 - pad, self.y0 - pad, self.x1 + pad, self.y1 + pad)


def text_size(text: str, fontsize_pt: float, dpi: float) -> tuple[float, float]:
    """Estimated (width, height) in pixels of ``text`` (lines split on newlines)."""
    px = fontsize_pt * dpi / 72.0
    lines = text.split("\n")
    return (max(len(line) for line in lines) * CHAR_EM * px, len(lines) * LINE_EM * px)


def hits_line(box: Box, xs, ys) -> bool:
    """Whether the polyline through (xs, ys) meets ``box`` (Liang-Barsky clipping of every
    segment at once)."""
    x, y = np.asarray(xs, float), np.asarray(ys, float)
    if len(x) == 1:
        return bool(box.x0 <= x[0] <= box.x1 and box.y0 <= y[0] <= box.y1)
    ax, ay, dx, dy = x[:-1], y[:-1], np.diff(x), np.diff(y)
    t0, t1 = np.zeros(len(ax)), np.ones(len(ax))
    alive = np.ones(len(ax), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        for p, q in ((-dx, ax - box.x0), (dx, box.x1 - ax), (-dy, ay - box.y0),
                     (dy, box.y1 - ay)):
            flat = p == 0
            alive &= ~(flat & (q < 0))
            t = np.where(flat, 0.0, q / np.where(flat, 1.0, p))
            t0 = np.where(~flat & (p < 0), np.maximum(t0, t), t0)
            t1 = np.where(~flat & (p > 0), np.minimum(t1, t), t1)
    return bool((alive & (t0 <= t1)).any())


def place_one(anchor: tuple[float, float], size: tuple[float, float], lines, frame: Box,
              taken: list[Box], gap: float = 6.0, pad: float = 2.0) -> tuple[Box, bool]:
    """The nearest box for one label that is off every polyline in ``lines``, off every box
    in ``taken`` and inside ``frame``, and whether it is free of all of them.

    Candidates, nearest first: the four corners of the anchor (upper-right and lower-left
    first: they are free of a falling curve), stepped further out until one is free. When
    none is free the least crowded candidate is returned with ``False``, and the caller
    shortens the label (``chart_drawing._label_cuts``).
    """
    (x, y), (w, h) = anchor, size
    best, best_cost = None, None
    for box in _candidates(x, y, w, h, gap):
        cost = (0 if box.inside(frame) else 100) + sum(
            10 for other in taken if box.overlaps(other, pad)) + sum(
            10 for xs, ys in lines if hits_line(box.grown(pad), xs, ys))
        if best_cost is None or cost < best_cost:
            best, best_cost = box, cost
        if cost == 0:
            break
    return best, best_cost == 0


def _candidates(x: float, y: float, w: float, h: float, gap: float):
    """Boxes around (x, y), nearest first: at each distance the upper-right and lower-left
    corners (free of a falling curve), then upper-left and lower-right; each both close to
    the point's vertical and moved out along the diagonal."""
    for k in range(16):
        dy = gap + k * 0.7 * h
        for dx in sorted({gap, gap + k * 0.4 * h}):
            yield Box(x + dx, y + dy, x + dx + w, y + dy + h)
            yield Box(x - dx - w, y - dy - h, x - dx, y - dy)
            yield Box(x - dx - w, y + dy, x - dx, y + dy + h)
            yield Box(x + dx, y - dy - h, x + dx + w, y - dy)
