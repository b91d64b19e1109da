"""Checks on a drawn chart (``chart_drawing.Drawn``): no text box overlaps another, and no
label meets a curve, both for the boxes the layout estimated from font size and for the
boxes matplotlib's renderer actually drew."""

from __future__ import annotations

from sqlrisk.chart_layout import Box, hits_line


def rendered_boxes(drawn) -> dict[str, Box]:
    """Every visible text of the figure (labels placed by sqlrisk, tick and axis labels)
    as drawn by the renderer, keyed by gid or a made-up name."""
    fig = drawn.fig
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    texts = list(fig.texts)
    for ax in (ax for ax in fig.axes if ax.axison):
        for axis in (ax.xaxis, ax.yaxis):
            lo, hi = sorted(axis.get_view_interval())
            span = hi - lo
            texts += [t.label1 for t in axis.get_major_ticks()  # ticks drawn: inside the view
                      if t.label1.get_text() and lo - 1e-9 * span <= t.get_loc() <= hi + 1e-9 * span]
        texts += [ax.xaxis.label, ax.yaxis.label]
    boxes = {}
    for n, t in enumerate(texts):
        if not t.get_visible() or not t.get_text():
            continue
        e = t.get_window_extent(renderer)
        boxes[t.get_gid() or f"text-{n}-{t.get_text()}"] = Box(e.x0, e.y0, e.x1, e.y1)
    return boxes


def collisions(boxes: dict[str, Box], lines, shrink: float = 0.5) -> list[str]:
    """Pairs of overlapping boxes and labels that meet a line (boxes shrunk by ``shrink``
    pixels, so touching glyph edges do not count)."""
    inner = {k: Box(b.x0 + shrink, b.y0 + shrink, b.x1 - shrink, b.y1 - shrink)
             for k, b in boxes.items()}
    found = []
    names = sorted(inner)
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            if inner[a].overlaps(inner[b]):
                found.append(f"{a} overlaps {b}")
        if "cut-label" in a:
            found += [f"{a} meets a curve" for xs, ys in lines if hits_line(inner[a], xs, ys)]
    return found


SVG = "{http://www.w3.org/2000/svg}"


def svg_texts(path) -> dict[str, str]:
    """The texts of an SVG written by sqlrisk, by the gid of the group holding each."""
    import xml.etree.ElementTree as ET

    out = {}
    for group in ET.parse(path).getroot().iter(f"{SVG}g"):
        texts = group.findall(f"{SVG}text")
        if group.get("id") and texts:
            out[group.get("id")] = "\n".join("".join(t.itertext()) for t in texts)
    return out


def svg_ids(path) -> set[str]:
    import xml.etree.ElementTree as ET

    return {g.get("id") for g in ET.parse(path).getroot().iter(f"{SVG}g") if g.get("id")}
