"""A self-contained, printable HTML report: headings, text, tables, embedded PNG maps and the caution.

The page has its own small stylesheet and no external assets (the interactive map's scripts are inlined); images
are embedded as base64 ``data:`` URIs, so one file can be mailed, archived or printed as it is. Output depends only
on what was added: no date is printed unless ``generated_at`` is given, so two runs on the same inputs give
identical files.
"""

from __future__ import annotations

import base64
import html
import math
import numbers
import os
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd

import coverkit
from coverkit.atomic import atomic_path
from coverkit.errors import CoverkitError, InputFileError

_PNG_MAGIC = b"\x89PNG\r\n\x1a\n"

_CSS = """
:root { --ink: #1d1d1d; --muted: #555; --rule: #c8c8c8; --warn-bg: #fff6e0; --warn-edge: #a66a00; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; color: var(--ink);
  max-width: 62rem; margin: 1.5rem auto; padding: 0 1.2rem; line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.7rem; margin: 0 0 0.3rem; }
h2 { font-size: 1.3rem; margin: 1.8rem 0 0.6rem; border-bottom: 1px solid var(--rule); padding-bottom: 0.2rem; }
h3 { font-size: 1.1rem; margin: 1.3rem 0 0.5rem; }
h4, h5, h6 { font-size: 1rem; margin: 1rem 0 0.4rem; }
p.meta { color: var(--muted); font-size: 0.85rem; margin: 0 0 1rem; }
.caution { border: 2px solid var(--warn-edge); background: var(--warn-bg); padding: 0.6rem 0.9rem;
  margin: 1rem 0; border-radius: 3px; }
.caution strong { color: var(--warn-edge); }
.caution p { margin: 0.2rem 0; }
.figures { display: grid; grid-template-columns: repeat(auto-fill, minmax(11rem, 1fr)); gap: 0.6rem;
  margin: 1rem 0; }
.figure-card { border: 1px solid var(--rule); padding: 0.5rem 0.7rem; border-radius: 3px; }
.figure-card .value { font-size: 1.45rem; font-weight: bold; display: block; }
.figure-card .label { font-size: 0.85rem; color: var(--muted); display: block; }
.table-wrap { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; margin: 0.8rem 0 1.2rem; font-size: 0.9rem; }
caption { caption-side: top; text-align: left; font-weight: bold; padding-bottom: 0.3rem; }
th, td { border-bottom: 1px solid var(--rule); padding: 0.25rem 0.6rem; text-align: left; vertical-align: top; }
th { border-bottom: 2px solid var(--ink); }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1rem 0 1.5rem; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: 0.9rem; color: var(--muted); margin-top: 0.3rem; }
footer { margin-top: 2rem; font-size: 0.85rem; color: var(--muted); }
@media print {
  body { max-width: none; margin: 0; font-size: 11pt; }
  figure, table, .caution, .figures { break-inside: avoid; }
  h2, h3 { break-after: avoid; }
}
""".strip()


class HtmlReport:
    """Build a report piece by piece, then :meth:`to_html` or :meth:`write` it.

    The caution box is placed under the title and again at the end of every report. It holds
    ``coverkit.CAUTION`` and any further caution added with :meth:`add_caution`.

    Parameters
    ----------
    title
        Report title (the page's only ``<h1>``).
    generated_at
        Optional text naming when the report was made (e.g. an ISO date). Left out by default so the same inputs
        give the same file.
    """

    def __init__(self, title: str, generated_at: str | None = None) -> None:
        if not isinstance(title, str) or not title.strip():
            raise CoverkitError("the report title is empty; give the study a name.")
        self.title = title.strip()
        self.generated_at = generated_at
        self._body: list[str] = []
        self._cautions: list[str] = [coverkit.CAUTION]

    # -- content --------------------------------------------------------------------------------------------
    def add_heading(self, text: str, level: int = 2) -> None:
        """A section heading, ``level`` 2 to 6 (level 1 is the title)."""
        if not isinstance(level, int) or not 2 <= level <= 6:
            raise CoverkitError(f"heading level {level!r} must be 2 to 6 (1 is the report title).")
        self._body.append(f"<h{level}>{_esc(text)}</h{level}>")

    def add_paragraph(self, text: str) -> None:
        """A paragraph of plain text (escaped; no markup)."""
        self._body.append(f"<p>{_esc(text)}</p>")

    def add_list(self, items: Iterable[object]) -> None:
        """A bulleted list of plain-text items."""
        lis = "".join(f"<li>{_esc(i)}</li>" for i in items)
        self._body.append(f"<ul>{lis}</ul>")

    def add_table(
        self,
        df: pd.DataFrame,
        caption: str | None = None,
        float_format: str | Callable[[float], str] = "{:,.1f}",
        index: bool = False,
        *,
        formats: Mapping[str, Callable[[float], str]] | None = None,
    ) -> None:
        """A table from a DataFrame; text escaped, numbers right-aligned, missing values shown as an en dash.

        Parameters
        ----------
        df
            The table. Column names become the header.
        caption
            Optional caption above the table.
        float_format
            A format string (default ``"{:,.1f}"``: thousands separators, one decimal) or a callable, applied to
            non-integer numbers; integers always print whole with thousands separators.
        index
            Whether to show the index as the first column.
        formats
            Optional number format per column name (overrides ``float_format`` there), e.g. from
            :func:`coverkit.report.tables.present`.
        """
        if not isinstance(df, pd.DataFrame):
            raise CoverkitError(f"add_table expects a pandas DataFrame, got {type(df).__name__}.")
        fmt = float_format.format if isinstance(float_format, str) else float_format
        frame = df.reset_index() if index else df
        numeric = [_is_numeric_column(frame.iloc[:, i]) for i in range(frame.shape[1])]
        head = "".join(
            (f'<th scope="col" class="num">{_esc(c)}</th>' if num else f'<th scope="col">{_esc(c)}</th>')
            for c, num in zip(frame.columns, numeric, strict=True)
        )
        formats = formats or {}
        fmts = [formats.get(str(c), fmt) for c in frame.columns]
        rows = []
        for values in frame.itertuples(index=False, name=None):
            cells = []
            for v, f in zip(values, fmts, strict=True):
                text, is_num = _cell(v, f)
                cells.append(f'<td class="num">{text}</td>' if is_num else f"<td>{text}</td>")
            rows.append("<tr>" + "".join(cells) + "</tr>")
        cap = f"<caption>{_esc(caption)}</caption>" if caption else ""
        self._body.append(
            f'<div class="table-wrap"><table>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>"
        )

    def add_image(self, png_path: str | os.PathLike[str], caption: str) -> None:
        """A PNG embedded as a base64 data URI, with a caption (also its alt text)."""
        path = Path(png_path)
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise InputFileError(f"{path}: cannot read the image ({exc.strerror}); write the map first.") from None
        if not data.startswith(_PNG_MAGIC):
            raise InputFileError(f"{path}: not a PNG file; the report embeds PNG maps and charts only.")
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        self._body.append(
            f'<figure><img src="{uri}" alt="{_esc(caption)}"><figcaption>{_esc(caption)}</figcaption></figure>'
        )

    def add_raw_html(self, markup: str) -> None:
        """Add ``markup`` as it is (not escaped): for trusted blocks built by coverkit itself, such as the inlined
        interactive map (:mod:`coverkit.report.web_map`). The report stays one file: nothing may be fetched."""
        self._body.append(str(markup))

    def add_caution(self, text: str = coverkit.CAUTION) -> None:
        """Add a caution to the boxed cautions shown under the title and at the end (each text once)."""
        text = " ".join(str(text).split())
        if text and text not in self._cautions:
            self._cautions.append(text)

    def add_key_figures(self, figures: Mapping[str, str]) -> None:
        """A small grid of headline numbers: label -> value text (already formatted, with units)."""
        cards = "".join(
            f'<div class="figure-card"><span class="value">{_esc(v)}</span><span class="label">{_esc(k)}</span></div>'
            for k, v in figures.items()
        )
        self._body.append(f'<div class="figures">{cards}</div>')

    # -- output ---------------------------------------------------------------------------------------------
    def _caution_box(self) -> str:
        paras = "".join(f"<p>{_esc(c)}</p>" for c in self._cautions)
        return f'<div class="caution" role="note"><strong>Caution</strong>{paras}</div>'

    def to_html(self) -> str:
        """The whole page as a string."""
        meta = f"coverkit {coverkit.__version__}"
        if self.generated_at:
            meta += f" · generated {self.generated_at}"
        caution = self._caution_box()
        parts = [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>{_esc(self.title)}</title>",
            f"<style>\n{_CSS}\n</style>",
            "</head>",
            "<body>",
            "<header>",
            f"<h1>{_esc(self.title)}</h1>",
            f'<p class="meta">{_esc(meta)}</p>',
            "</header>",
            caution,
            "<main>",
            *self._body,
            "</main>",
            "<footer>",
            caution,
            f"<p>{_esc(meta)}</p>",
            "</footer>",
            "</body>",
            "</html>",
        ]
        return "\n".join(parts) + "\n"

    def write(self, path: str | os.PathLike[str]) -> Path:
        """Write the page (UTF-8) atomically; an existing file is replaced only when the new one is complete."""
        target = Path(path)
        text = self.to_html()
        with atomic_path(target) as tmp, open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        return target


def _esc(value: object) -> str:
    return html.escape(str(value), quote=True)


def _is_numeric_column(series: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def _cell(value: object, fmt: Callable[[float], str]) -> tuple[str, bool]:
    """Text of one cell and whether it is a number (right-aligned)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return "–", False
    if isinstance(value, bool | np.bool_):
        return ("yes" if value else "no"), False
    if isinstance(value, numbers.Integral):
        return f"{int(value):,}", True
    if isinstance(value, numbers.Real):
        v = float(value)
        if math.isnan(v):
            return "–", True
        if math.isinf(v):
            return ("not reached" if v > 0 else "−∞"), True
        return _esc(fmt(v)), True
    return _esc(value), False
