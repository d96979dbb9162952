"""One figure style for the project: colour-blind-safe, labelled axes.

Figures are written as PNG and PDF with the run-id in their metadata (not in
the visible area) and without creation dates, so the same inputs give the
same files.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from liqpanel.io import atomic_path  # noqa: E402

# Okabe & Ito (2008) colour-blind-safe palette
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#000000")

STYLE = {
    "figure.figsize": (7.0, 4.0),
    "axes.prop_cycle": matplotlib.cycler(color=PALETTE),
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "font.size": 10,
    "savefig.dpi": 150,
    "svg.hashsalt": "liqpanel",
    "pdf.fonttype": 42,
}


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


def line_chart(series: dict, *, stem, title: str, ylabel: str, rid: str, xlabel: str = "month") -> list[Path]:
    """Lines of (x, y) pairs keyed by label."""
    with plt.rc_context(STYLE):
        fig, ax = plt.subplots()
        for label, (x, y) in series.items():
            ax.plot(x, y, label=label, linewidth=1.6)
        ax.set_title(title)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.legend(frameon=False)
        fig.autofmt_xdate()
        return save(fig, stem, rid)


def scatter_chart(points: dict, *, stem, title: str, xlabel: str, ylabel: str, rid: str) -> list[Path]:
    """Scatter of (x, y) pairs keyed by label, one panel per label on shared axes, each with the 45-degree line.

    One panel per series keeps a dozen proxies readable where one crowded
    panel would repeat the palette's colours; a series without points says so.
    """
    import math

    values = [v for x, y in points.values() for v in (*x, *y)]
    lo, hi = (min(values), max(values)) if values else (0.0, 1.0)
    n = max(len(points), 1)
    cols = min(n, 4)
    rows = math.ceil(n / cols)
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(rows, cols, figsize=(2.9 * cols + 0.6, 2.7 * rows + 0.8), sharex=True, sharey=True,
                                 squeeze=False)
        for ax, (label, (x, y)) in zip(axes.flat, points.items()):
            ax.plot([lo, hi], [lo, hi], color="#000000", linewidth=0.8, linestyle="--")
            if x:
                ax.scatter(x, y, s=6, alpha=0.5, color=PALETTE[0])
            else:
                ax.text(0.5, 0.5, "no value", transform=ax.transAxes, ha="center", va="center")
            ax.set_title(label, fontsize=9)
        for ax in list(axes.flat)[len(points):]:
            ax.set_visible(False)
        fig.suptitle(f"{title} (dashed: 45-degree line)")
        fig.supxlabel(xlabel)
        fig.supylabel(ylabel)
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
    with plt.rc_context({**STYLE, "axes.grid": False, "font.size": 8}):
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
        fig.suptitle(title)
        if image is not None:
            fig.colorbar(image, ax=axes, label=colorbar_label, extend="both" if diverging else "neither", shrink=0.8)
        return save(fig, stem, rid)
