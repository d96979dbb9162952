"""One figure style for the project, and the few kinds of figure it draws.

The style lives in ``liqpanel.mplstyle`` (shipped with the package; use it
with :func:`style`). Every figure here

* gives each series its own colour and line style, whatever their number
  (:func:`series_styles`: six colour-blind-safe colours of Okabe & Ito 2008
  with four line styles, then markers); benchmarks (a true value, a
  high-minus-low line) are drawn thick and black, beneath the others;
* puts the legend outside the plotting area, to the right, so it hides no
  data;
* carries a title saying what is plotted and axis labels with units.

Figures are written as PNG and PDF with the run-id in their metadata (not in
the visible area) and without creation dates, so the same inputs give the
same files. :func:`describe` reports what a drawn figure shows (titles,
series and their styles, whether a legend overlaps the data), for tests.

Kinds: :func:`line_chart` (series over months), :func:`panel_scatter` (one
small panel per series against a common benchmark, with the 45-degree line)
and :func:`heat_maps` (grids on one colour scale).
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator, Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from liqpanel.core.io import atomic_path  # noqa: E402

STYLE_FILE = Path(__file__).resolve().parents[1] / "liqpanel.mplstyle"

# Okabe & Ito (2008) colour-blind-safe palette, without its yellow (too pale
# for a line on white) and black (kept for benchmarks)
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9")
LINESTYLES = ("-", "--", "-.", ":")
MARKERS = ("", "o", "s", "^")
# under the other lines, so an estimate that coincides with the benchmark shows on top of it
BENCHMARK = {"color": "#000000", "linestyle": "-", "linewidth": 3.2, "zorder": 1.5}


@contextmanager
def style(**overrides: Any) -> Iterator[None]:
    """Draw inside the project's style (``liqpanel.mplstyle``), with ``overrides`` on top."""
    with plt.style.context(STYLE_FILE), plt.rc_context(overrides):
        yield


def series_styles(n: int) -> list[dict[str, Any]]:
    """``n`` distinct (colour, line style, marker) combinations for ``ax.plot``.

    Colour and line style change together (six colours, four line styles:
    the first 12 series differ in both, so two series that coincide still
    show each other's dashes), then markers are added: 48 series stay apart,
    more repeat from the start.
    """
    out = []
    for i in range(n):
        k = i % (12 * len(MARKERS))
        entry = {"color": PALETTE[k % len(PALETTE)], "linestyle": LINESTYLES[k % len(LINESTYLES)]}
        marker = MARKERS[k // 12]
        if marker:
            entry.update(marker=marker, markersize=3.5, markevery=3)
        out.append(entry)
    return out


@dataclass
class Series:
    """One line: its label in the legend, x and y, and optionally a fixed style."""

    label: str
    x: Sequence
    y: Sequence
    style: dict[str, Any] | None = None
    benchmark: bool = False  # drawn thick and black (a true value, a high-minus-low line)
    extra: dict[str, Any] = field(default_factory=dict)


def legend_outside(ax, *, title: str | None = None) -> None:
    """The legend to the right of the axes, top-aligned, outside the data."""
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, title=title,
                  title_fontsize=9, alignment="left")


def save(fig, stem: str | Path, rid: str) -> list[Path]:
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    paths = []
    for suffix, meta in (
        (".png", {"Software": None, "Description": f"liqpanel run {rid}"}),
        (".pdf", {"Creator": None, "Producer": None, "CreationDate": None, "Subject": f"liqpanel run {rid}"}),
    ):
        path = stem.with_suffix(suffix)
        with atomic_path(path) as tmp:
            fig.savefig(tmp, format=suffix[1:], metadata=meta, bbox_inches="tight")
        paths.append(path)
    plt.close(fig)
    return paths


def _as_series(series: dict | Sequence[Series]) -> list[Series]:
    if isinstance(series, dict):
        return [Series(str(label), x, y) for label, (x, y) in series.items()]
    return list(series)


def line_chart(
    series: dict | Sequence[Series], *, stem, title: str, ylabel: str, rid: str, xlabel: str = "month",
    legend_title: str | None = None, hline: float | None = None,
) -> list[Path]:
    """Lines over months: ``series`` is a list of :class:`Series` or a mapping label -> (x, y).

    Series without a fixed style take the next of :func:`series_styles`;
    benchmark series are thick and black. ``hline`` draws a thin reference
    line (e.g. 1 for cumulative value).
    """
    lines = _as_series(series)
    free = iter(series_styles(sum(1 for s in lines if s.style is None and not s.benchmark)))
    with style():
        fig, ax = plt.subplots()
        if hline is not None:
            ax.axhline(hline, color="#888888", linewidth=0.8, zorder=1)
        for s in lines:
            look = BENCHMARK if s.benchmark else (s.style or next(free))
            ax.plot(s.x, s.y, label=s.label, **{**look, **s.extra})
        ax.set_title(title)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        if len(lines) > 1:  # one line needs no legend: the title names it
            legend_outside(ax, title=legend_title)
        fig.autofmt_xdate()
        return save(fig, stem, rid)


def panel_scatter(
    panels: dict[str, tuple[Sequence[float], Sequence[float]]], *, stem, title: str, xlabel: str, ylabel: str,
    rid: str, columns: int = 3,
) -> list[Path]:
    """One small scatter per entry (label -> (x, y)) on shared axes, each with the 45-degree line.

    Each panel's title gives the number of points and their correlation, so
    no legend is needed.
    """
    import numpy as np

    n = max(len(panels), 1)
    ncols = min(columns, n)
    nrows = -(-n // ncols)
    values = [np.asarray(v, dtype=float) for x, y in panels.values() for v in (x, y) if len(v)]
    both = np.concatenate(values) if values else np.array([0.0, 1.0])
    lo, hi = float(np.nanmin(both)), float(np.nanmax(both))
    pad = 0.03 * (hi - lo if hi > lo else 1.0)
    lo, hi = lo - pad, hi + pad
    with style(**{"font.size": 9, "axes.titleweight": "normal", "axes.titlesize": 9}):
        fig, axes = plt.subplots(nrows, ncols, figsize=(2.7 * ncols + 0.6, 2.6 * nrows + 0.7), squeeze=False,
                                 sharex=True, sharey=True, layout="constrained")
        for ax, (label, (x, y)) in zip(axes.flat, panels.items()):
            x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
            ax.plot([lo, hi], [lo, hi], color="#000000", linewidth=0.8, linestyle="--")
            ax.scatter(x, y, s=5, alpha=0.35, color=PALETTE[0], linewidths=0)
            corr = float(np.corrcoef(x, y)[0, 1]) if len(x) > 2 and np.std(x) > 0 and np.std(y) > 0 else math.nan
            ax.set_title(f"{label}\n(n = {len(x)}, correlation {corr:.2f})" if math.isfinite(corr) else
                         f"{label}\n(n = {len(x)})")
            ax.set_xlim(lo, hi)
            ax.set_ylim(lo, hi)
            ax.set_aspect("equal", adjustable="box")
        for ax in axes.flat[len(panels):]:
            ax.set_visible(False)
        for ax in axes[-1, :]:
            ax.set_xlabel(xlabel)
        for ax in axes[:, 0]:
            ax.set_ylabel(ylabel)
        fig.suptitle(title, fontweight="bold")
        return save(fig, stem, rid)


def heat_maps(
    panels: dict,
    *,
    stem,
    title: str,
    xlabel: str,
    ylabel: str,
    colorbar_label: str,
    rid: str,
    col_labels: list[str],
    row_labels: list[str],
    limit: float | None = None,
    diverging: bool = True,
    columns: int = 3,
) -> list[Path]:
    """Heat maps on one colour scale, one panel per entry of ``panels``.

    ``panels`` maps a panel title to ``(values, notes)``: values rows x
    columns (None or NaN leaves a cell blank; rows run bottom to top), notes
    the same shape of strings written in the cells (None: the values). A
    diverging scale (a signed quantity such as a bias) uses the
    colour-blind-safe 'PuOr' map centred on zero with limits +-``limit`` (the
    largest absolute value when None); otherwise 'cividis'. Values beyond the
    limits take the end colours.
    """
    import numpy as np
    from matplotlib.colors import Normalize

    grids = {k: np.array([[np.nan if v is None else float(v) for v in row] for row in vals], dtype=float)
             for k, (vals, _) in panels.items()}
    finite = np.concatenate([g[np.isfinite(g)] for g in grids.values()]) if grids else np.array([])
    if diverging:
        bound = limit if limit is not None else (float(np.abs(finite).max()) if finite.size else 1.0)
        bound = bound if bound > 0 else 1.0
        norm, cmap = Normalize(-bound, bound), plt.get_cmap("PuOr")
    else:
        lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
        norm, cmap = Normalize(lo, hi if hi > lo else lo + 1.0), plt.get_cmap("cividis")
    n = max(len(panels), 1)
    ncols = min(columns, n)
    nrows = -(-n // ncols)
    cell_w, cell_h = max(3.2, 0.9 * len(col_labels) + 0.6), max(2.4, 0.55 * len(row_labels) + 1.0)
    with style(**{"axes.grid": False, "font.size": 8, "axes.titleweight": "normal", "axes.titlesize": 9}):
        fig, axes = plt.subplots(nrows, ncols, figsize=(cell_w * ncols + 1.2, cell_h * nrows + 0.6), squeeze=False,
                                 sharex=True, sharey=True, layout="constrained")
        image = None
        for ax, (name, (_, notes)) in zip(axes.flat, panels.items()):
            grid = grids[name]
            image = ax.imshow(np.ma.masked_invalid(grid), cmap=cmap, norm=norm, origin="lower", aspect="auto")
            for i in range(grid.shape[0]):
                for j in range(grid.shape[1]):
                    text = notes[i][j] if notes is not None else ("" if np.isnan(grid[i, j]) else f"{grid[i, j]:.2g}")
                    if not text:
                        continue
                    red, green, blue, _ = cmap(norm(grid[i, j])) if np.isfinite(grid[i, j]) else (1.0, 1.0, 1.0, 1.0)
                    dark = 0.299 * red + 0.587 * green + 0.114 * blue < 0.5
                    ax.text(j, i, text, ha="center", va="center", fontsize=7, color="#FFFFFF" if dark else "#000000")
            ax.set_title(name)
            ax.set_xticks(range(len(col_labels)), col_labels, rotation=30, ha="right")
            ax.set_yticks(range(len(row_labels)), row_labels)
        for ax in axes.flat[len(panels):]:
            ax.set_visible(False)
        for j in range(ncols):  # the lowest panel of each column carries the x axis
            lowest = axes[(len(panels) - 1 - j) // ncols, j]
            lowest.xaxis.set_tick_params(labelbottom=True)
            lowest.set_xlabel(xlabel)
        for ax in axes[:, 0]:
            ax.set_ylabel(ylabel)
        fig.suptitle(title, fontweight="bold")
        if image is not None:
            fig.colorbar(image, ax=axes, label=colorbar_label, extend="both" if diverging else "neither", shrink=0.8)
        return save(fig, stem, rid)


def describe(fig) -> dict[str, Any]:
    """What a drawn figure shows: its title, and per axes the title, the
    labelled lines with their (colour, line style, marker), and whether the
    legend's box overlaps the plotting area."""
    from matplotlib.colors import to_hex

    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    suptitle = fig.get_suptitle() if hasattr(fig, "get_suptitle") else (fig._suptitle.get_text() if fig._suptitle else "")
    axes = []
    for ax in fig.axes:
        if not ax.get_visible() or ax.get_label() == "<colorbar>":
            continue
        lines = [
            {"label": line.get_label(), "style": (to_hex(line.get_color()), str(line.get_linestyle()), str(line.get_marker()))}
            for line in ax.get_lines() if not line.get_label().startswith("_")
        ]
        legend = ax.get_legend()
        overlaps = bool(legend) and legend.get_window_extent(renderer).overlaps(ax.get_window_extent(renderer))
        axes.append({"title": ax.get_title(), "lines": lines, "legend": legend is not None, "legend_over_data": overlaps,
                     "ylabel": ax.get_ylabel(), "xlabel": ax.get_xlabel()})
    return {"title": suptitle, "axes": axes}
