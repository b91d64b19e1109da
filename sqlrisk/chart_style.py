"""sqlrisk's look: one palette, one font, number formats, and saving a figure as SVG or PNG.

Every chart is drawn once, with matplotlib, and saved in the format the file name asks for;
the settings here make both files the same picture and the same bytes run after run (a
fixed font bundled with matplotlib, no dates in the metadata, a fixed SVG id salt).

The palette is ours: bands run from warm clay (below the lowest cut) through ochre and
sage to sea green (the highest band), light enough to write on; the curve and its points
are a deep ink blue; grid lines a warm grey.
"""

from __future__ import annotations

from pathlib import Path

from .errors import SqlriskError

INK = "#23395b"
TEXT = "#2a2a2a"
QUIET = "#6b665e"
GRID = "#e6e2da"
#: Band fills, lowest band first (clay, ochre, sage, sea green) and their deeper edges.
BAND_FILLS = ("#f1c7b6", "#f3dfaa", "#cfe2bd", "#a9d3cd")
BAND_EDGES = ("#b8644a", "#a67c22", "#5f8a4a", "#2f7d74")
NEUTRAL_FILL = "#dfe3e8"
FONT = "DejaVu Sans"
DPI = 100


def _mix(a: str, b: str, t: float) -> str:
    ca = [int(a[i:i + 2], 16) for i in (1, 3, 5)]
    cb = [int(b[i:i + 2], 16) for i in (1, 3, 5)]
    return "#" + "".join(f"{round(x + (y - x) * t):02x}" for x, y in zip(ca, cb))


def band_colours(count: int, ramp: tuple[str, ...] = BAND_FILLS) -> list[str]:
    """``count`` colours from the low end of the ramp to the high end (one band: neutral)."""
    if count <= 1:
        return [NEUTRAL_FILL] * count
    out = []
    for k in range(count):
        pos = k * (len(ramp) - 1) / (count - 1)
        i = min(int(pos), len(ramp) - 2)
        out.append(_mix(ramp[i], ramp[i + 1], pos - i))
    return out


def compact_money(x: float) -> str:
    """1234567 -> '1.23M', 45000 -> '45k' (axis labels)."""
    sign = "-" if x < 0 else ""
    x = abs(float(x))
    for unit, size in (("B", 1e9), ("M", 1e6), ("k", 1e3)):
        if x >= size:
            return f"{sign}{x / size:.3g}{unit}"
    return f"{sign}{x:.3g}"


def pyplot():
    """matplotlib's pyplot on the file-only backend, set to sqlrisk's font and SVG options."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:  # a required dependency; only a broken install gets here
        raise SqlriskError("chart: matplotlib is missing; reinstall sqlrisk "
                           "(pip install sqlrisk) to draw charts") from None
    matplotlib.rcParams.update({
        "font.family": FONT, "font.size": 10, "text.color": TEXT, "axes.labelcolor": TEXT,
        "xtick.color": QUIET, "ytick.color": QUIET, "axes.edgecolor": QUIET,
        "svg.fonttype": "none", "svg.hashsalt": "sqlrisk", "axes.unicode_minus": False,
    })
    return matplotlib, plt


def write(fig, target, fmt: str) -> None:
    """Write ``fig`` to a path or file object as ``fmt`` ('svg' or 'png'), without
    timestamps, so the same figure gives the same bytes."""
    if fmt == "png":
        fig.savefig(target, format="png", dpi=DPI, metadata={"Software": None})
    else:
        fig.savefig(target, format="svg", metadata={"Date": None, "Creator": None})


def save(fig, path: Path) -> Path:
    """Write ``fig`` as SVG or PNG (by the suffix) and close it."""
    write(fig, path, "png" if Path(path).suffix.lower() == ".png" else "svg")
    pyplot()[1].close(fig)
    return path


def percent_ticks(ax, axis: str = "y") -> None:
    import matplotlib.ticker as ticker

    fmt = ticker.FuncFormatter(lambda v, _: f"{v:.0%}")
    (ax.yaxis if axis == "y" else ax.xaxis).set_major_formatter(fmt)


def money_ticks(ax, count: int = 7) -> None:
    import matplotlib.ticker as ticker

    ax.xaxis.set_major_locator(ticker.MaxNLocator(count, steps=[1, 2, 2.5, 5, 10]))
    ax.xaxis.set_major_formatter(ticker.FuncFormatter(lambda v, _: compact_money(v)))


def quiet_frame(ax) -> None:
    """Only the left and bottom spines, a warm grey grid behind the data."""
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.grid(color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    ax.tick_params(length=3)


def fig_px(fig) -> tuple[float, float]:
    w, h = fig.get_size_inches()
    return w * DPI, h * DPI

