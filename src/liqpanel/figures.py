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
    """Scatter of (x, y) pairs keyed by label, with the 45-degree line."""
    with plt.rc_context(STYLE):
        fig, ax = plt.subplots(figsize=(5.5, 5.0))
        lo, hi = float("inf"), float("-inf")
        for label, (x, y) in points.items():
            ax.scatter(x, y, s=8, alpha=0.5, label=label)
            if x:
                lo, hi = min(lo, min(x), min(y)), max(hi, max(x), max(y))
        if lo < hi:
            ax.plot([lo, hi], [lo, hi], color="#000000", linewidth=0.8, linestyle="--", label="45-degree line")
        ax.set_title(title)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.legend(frameon=False)
        return save(fig, stem, rid)
