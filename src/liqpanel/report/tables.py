"""Tables as CSV, LaTeX, Markdown and HTML, and the run folder (``RunFolder``) that writes them with their captions."""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any

import polars as pl

from liqpanel.report.formatting import format_frame, relabel
from liqpanel.core.io import write_text


_NUMBER = re.compile(r"^[(\[]?([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)[)\]]?\**$")


def number_in_text(text: str) -> float | None:
    """The number in a formatted cell such as ``0.488``, ``(1.962)``, ``-0.019**``; else None."""
    match = _NUMBER.match(text.strip()) if isinstance(text, str) else None
    return float(match.group(1)) if match else None


def format_number(value: float, digits: int) -> str:
    """``digits`` decimals; numbers too small for that keep three significant digits."""
    if math.isnan(value):
        return ""
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    size = abs(value)
    if size == 0 or size >= 10.0 ** -(digits - 2) or digits < 2:
        return f"{value:.{digits}f}"
    if size < 1e-10:
        return f"{value:.2e}"
    return f"{value:.{-math.floor(math.log10(size)) + 2}f}"


_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "_": r"\_", "#": r"\#", "$": r"\$",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
}


def _latex_escape(text: str) -> str:
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)


def _latex_number(text: str) -> str:
    return _latex_escape(text).replace("-", "$-$", 1) if "-" in text[:2] else _latex_escape(text)


def _decimal_column(cells: list[str]) -> bool:
    filled = [c for c in cells if c]
    return bool(filled) and all(number_in_text(c) is not None for c in filled)


def _split_decimal(text: str) -> tuple[str, str]:
    """``(1.962)`` -> ``("(1", ".962)")``: the two halves of a decimal-aligned cell."""
    cut = text.find(".")
    return (text, "") if cut < 0 else (text[:cut], text[cut:])


def to_latex(
    df: pl.DataFrame, *, caption: str, label: str, notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False,
) -> str:
    """A booktabs table with the caption above and the notes below.

    Numbers are printed by :mod:`liqpanel.report.formatting` (decimals by kind of
    number, months as YYYY-MM, headings and row labels through ``labels``).
    The first column (row labels) is left-aligned. Every other column whose
    cells are all numbers (plain, or decorated like ``(1.962)`` or ``0.05**``)
    is aligned on the decimal point: it is set as a pair of columns ``r@{}l``
    (integer part right-aligned, the rest left-aligned) under one heading, so
    it needs no LaTeX package beyond booktabs. Other columns are left-aligned.
    """
    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    aligned = [i > 0 and _decimal_column([r[i] for r in cells]) for i in range(df.width)]
    spec = "".join("r@{}l" if a else "l" for a in aligned)
    head = [rf"\multicolumn{{2}}{{c}}{{{_latex_escape(c)}}}" if a else _latex_escape(c) for c, a in zip(headings, aligned)]
    lines = [
        r"% liqpanel table; needs \usepackage{booktabs}",
        r"\begin{table}[htbp]",
        r"\centering",
        rf"\caption{{{_latex_escape(caption)}}}",
        rf"\label{{{label}}}",
        rf"\begin{{tabular}}{{{spec}}}",
        r"\toprule",
        " & ".join(head) + r" \\",
        r"\midrule",
    ]
    for row in cells:
        parts = []
        for text, a in zip(row, aligned):
            parts += [_latex_number(p) for p in _split_decimal(text)] if a else [_latex_escape(text)]
        lines.append(" & ".join(parts) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    if notes:
        lines += [
            r"\par\medskip",
            r"\begin{minipage}{0.95\linewidth}\footnotesize",
            rf"\textit{{Notes:}} {_latex_escape(notes)}",
            r"\end{minipage}",
        ]
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


def to_markdown(
    df: pl.DataFrame, *, caption: str = "", notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False,
) -> str:
    """A pipe table: caption in bold above, notes in italics below; numbers as in :func:`to_latex`."""
    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    header = "| " + " | ".join(headings) + " |"
    rule = "|" + "|".join(["---"] + ["---:"] * (df.width - 1)) + "|"
    rows = ["| " + " | ".join(row) + " |" for row in cells]
    head = [f"**{caption}**", ""] if caption else []
    tail = ["", f"*Notes:* {notes}"] if notes else []
    return "\n".join(head + [header, rule, *rows] + tail) + "\n"


def to_html(
    df: pl.DataFrame, *, caption: str, notes: str = "", digits: int = 3, labels: dict | None = None,
    by_row: bool = False, title: str = "",
) -> str:
    """A small standalone page: the caption, the table as printed in LaTeX and Markdown, the notes.

    Snakemake's HTML report (``make report``) shows it when a table is chosen.
    """
    from html import escape

    headings, cells = format_frame(df, digits=digits, labels=labels, by_row=by_row)
    numeric = [i > 0 and _decimal_column([r[i] for r in cells]) for i in range(df.width)]

    def row(tag: str, texts: list[str]) -> str:
        return "<tr>" + "".join(
            f'<{tag} class="{"num" if n else "text"}">{escape(t)}</{tag}>' for t, n in zip(texts, numeric)
        ) + "</tr>"

    body = "\n".join(row("td", r) for r in cells)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{escape(title or caption)}</title>
<style>
body {{ font-family: Georgia, 'Times New Roman', serif; margin: 1.5em; color: #111; }}
table {{ border-collapse: collapse; border-top: 2px solid #111; border-bottom: 2px solid #111; }}
thead th {{ border-bottom: 1px solid #111; }}
th, td {{ padding: 0.2em 0.8em; }}
.num {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
.text {{ text-align: left; }}
caption {{ caption-side: top; text-align: left; font-weight: bold; padding-bottom: 0.5em; }}
p.notes {{ max-width: 50em; font-size: 0.9em; }}
</style></head>
<body>
<table>
<caption>{escape(caption)}</caption>
<thead>{row("th", headings)}</thead>
<tbody>
{body}
</tbody>
</table>
{f'<p class="notes"><em>Notes:</em> {escape(notes)}</p>' if notes else ''}
</body></html>
"""


def write_table(
    df: pl.DataFrame, stem: str | Path, *, caption: str, label: str, notes: str = "",
    display: pl.DataFrame | None = None, digits: int = 3, labels: dict | None = None, by_row: bool = False,
) -> list[Path]:
    """Write ``stem``.csv (full precision), .tex (booktabs), .md and .html.

    ``display`` is the layout for print (e.g. coefficients over t-statistics
    in parentheses) when it differs from the numbers in the CSV. ``by_row``:
    the rows are different variables, so decimals follow each row's scale.
    """
    stem = Path(stem)
    shown = df if display is None else display
    style = {"digits": digits, "labels": labels, "by_row": by_row}
    csv = write_text(df.write_csv(), stem.with_suffix(".csv"))
    tex = write_text(to_latex(shown, caption=caption, label=label, notes=notes, **style), stem.with_suffix(".tex"))
    md = write_text(to_markdown(shown, caption=caption, notes=notes, **style), stem.with_suffix(".md"))
    html = write_text(to_html(shown, caption=caption, notes=notes, title=stem.name, **style), stem.with_suffix(".html"))
    return [csv, tex, md, html]


def join_notes(*parts: str) -> str:
    """Sentences joined with single spaces, each ending in a full stop."""
    out = []
    for part in parts:
        part = (part or "").strip()
        if part:
            out.append(part if part.endswith((".", "!", "?")) else part + ".")
    return " ".join(out)


class RunFolder:
    """Writes one run's tables and figures and remembers what each one is.

    Captions, LaTeX labels and notes come from the code that makes a table;
    ``report.captions.<name>`` in the config replaces the caption or label and
    adds a sentence to the notes. Every table's notes end with ``sample``
    (the sample the run covers). What was written is in :attr:`contents`,
    which goes into the manifest.
    """

    def __init__(
        self, path: str | Path, *, rid: str, captions: dict | None = None, sample: str = "", digits: int = 3,
        labels: dict | None = None,
    ):
        self.path = Path(path)
        self.rid = rid
        self.captions = captions or {}
        self.sample = sample
        self.digits = digits
        self.labels = labels or {}
        self.tables: dict[str, dict[str, Any]] = {}
        self.figures: dict[str, dict[str, Any]] = {}

    def _settings(self, name: str, caption: str, notes: str) -> tuple[str, str | None, str]:
        own = self.captions.get(name) or {}
        caption = own.get("caption", relabel(caption, self.labels))  # the user's own caption is kept as written
        return caption, own.get("label"), join_notes(notes, own.get("notes", ""), self.sample)

    def table(
        self, name: str, frame: pl.DataFrame, *, caption: str, notes: str = "", label: str | None = None,
        display: pl.DataFrame | None = None, by_row: bool = False,
    ) -> list[Path]:
        """Write a table (see :func:`write_table`); ``by_row`` when its rows are different variables."""
        caption, own_label, notes = self._settings(name, caption, notes)
        label = own_label or label or f"tab:{name}"
        paths = write_table(
            frame, self.path / "tables" / name, caption=caption, label=label, notes=notes, display=display,
            digits=self.digits, labels=self.labels, by_row=by_row,
        )
        self.tables[name] = {
            "caption": caption, "label": label, "notes": notes, "rows": frame.height,
            "columns": frame.columns, "files": [str(p.relative_to(self.path)) for p in paths],
        }
        return paths

    def figure(self, name: str, paths: list[Path], *, caption: str, notes: str = "") -> list[Path]:
        caption, _, notes = self._settings(name, caption, notes)
        self.figures[name] = {"caption": caption, "notes": notes, "files": [str(Path(p).relative_to(self.path)) for p in paths]}
        return paths

    def contents(self) -> dict[str, dict]:
        """Tables and figures with their captions; files written by other means are listed too."""
        tables = dict(self.tables)
        for csv in sorted((self.path / "tables").glob("*.csv")):
            tables.setdefault(csv.stem, {"caption": csv.stem.replace("_", " "), "files": [str(csv.relative_to(self.path))]})
        figures = dict(self.figures)
        for png in sorted((self.path / "figures").glob("*.png")):
            figures.setdefault(png.stem, {"caption": png.stem.replace("_", " "), "files": [str(png.relative_to(self.path))]})
        return {"tables": dict(sorted(tables.items())), "figures": dict(sorted(figures.items()))}
