"""A single self-contained HTML deployment report.

The file has its CSS inline and its figures as base64 PNG data, and refers
to nothing outside itself, so it can be mailed, opened offline and printed.
All text from the caller is HTML-escaped.
"""

from __future__ import annotations

import base64
import html as _html
import io
from pathlib import Path

import pandas as pd

from ._common import (
    all_cautions,
    decimals_for,
    flatten_table,
    format_number,
    is_missing,
    is_number,
    normalise_assumptions,
    normalise_lines,
    numeric_columns,
)

__all__ = ["write_deployment_html", "figure_to_base64_png"]

_CSS = """
:root { --ink: #1d2329; --muted: #5b6670; --line: #d5dbe0; --band: #f3f5f7;
        --accent: #1f5f8b; --warn: #8a5a00; --warnbg: #fff6e0; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
       sans-serif; color: var(--ink); margin: 0 auto; padding: 1.5rem 2rem 3rem;
       max-width: 1200px; line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.7rem; margin: 0 0 .3rem; }
h2 { font-size: 1.25rem; margin: 2rem 0 .6rem; padding-bottom: .2rem;
     border-bottom: 2px solid var(--accent); }
nav { font-size: .9rem; color: var(--muted); margin-bottom: 1rem; }
nav a { color: var(--accent); margin-right: .8rem; text-decoration: none; }
.safety { background: var(--warnbg); border-left: 4px solid var(--warn); padding: .6rem 1rem;
          margin: 1rem 0; font-size: .92rem; }
.cards { display: grid; grid-template-columns: repeat(auto-fill, minmax(200px, 1fr));
         gap: .7rem; }
.card { border: 1px solid var(--line); border-radius: 6px; padding: .6rem .8rem;
        background: var(--band); break-inside: avoid; page-break-inside: avoid; }
.card .metric { font-size: .85rem; color: var(--muted); }
.card .value { font-size: 1.35rem; font-weight: 600; font-variant-numeric: tabular-nums; }
.card .unit { font-size: .85rem; color: var(--muted); margin-left: .25rem; }
.table-wrap { overflow-x: auto; margin: .4rem 0 1rem; }
table { border-collapse: collapse; font-size: .86rem; font-variant-numeric: tabular-nums; }
th, td { border: 1px solid var(--line); padding: .25rem .5rem; vertical-align: top; }
thead th { background: var(--band); text-align: left; position: sticky; top: 0; }
tbody tr:nth-child(even) { background: #fafbfc; }
figure { margin: 1rem 0; break-inside: avoid; page-break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--line); }
figcaption { font-size: .85rem; color: var(--muted); }
.empty { color: var(--muted); font-style: italic; }
ul.notes li { margin-bottom: .3rem; }
@media print {
  @page { size: A4 landscape; margin: 12mm; }
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  nav { display: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  .table-wrap { overflow: visible; }
  table { font-size: 8.5pt; width: 100%; }
  thead { display: table-header-group; }
  thead th { position: static; }
  tr, td, th { break-inside: avoid; page-break-inside: avoid; }
  figure img { max-width: 100%; max-height: 170mm; border: none; }
  a { color: inherit; text-decoration: none; }
}
"""

_SECTIONS = (
    ("headline", "Headline totals"),
    ("figures", "Figures"),
    ("by_district", "By district"),
    ("by_depot", "By depot"),
    ("kit_types", "Kit types"),
    ("comparisons", "Comparisons"),
    ("warnings", "Warnings"),
    ("sites", "Sites"),
    ("assumptions", "Assumptions"),
    ("cautions", "Cautions"),
)


def _e(value) -> str:
    return _html.escape(str(value), quote=True)


def figure_to_base64_png(figure, dpi: int = 110) -> str:
    """PNG of a matplotlib Figure (rendered with Agg) as base64 text.

    Bytes that already hold a PNG are encoded as they are.
    """
    if isinstance(figure, (bytes, bytearray)):
        return base64.b64encode(bytes(figure)).decode("ascii")
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    buffer = io.BytesIO()
    if getattr(figure, "canvas", None) is None or not isinstance(figure.canvas, FigureCanvasAgg):
        FigureCanvasAgg(figure)
    figure.savefig(buffer, format="png", dpi=dpi, bbox_inches="tight")
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def _formatted(table: pd.DataFrame) -> tuple[pd.DataFrame, list[int]]:
    """Numbers as text with thousands separators; positions of number columns."""
    numeric = set(numeric_columns(table))
    out = {}
    positions = []
    for i, name in enumerate(table.columns):
        values = table[name].tolist()
        if name in numeric:
            decimals = decimals_for(values, name)
            out[name] = [format_number(v, decimals) for v in values]
            positions.append(i)
        else:
            out[name] = [
                "" if is_missing(v)
                else format_number(v, decimals_for([v], name)) if is_number(v)
                else str(v)
                for v in values
            ]
    return pd.DataFrame(out, columns=list(table.columns), dtype=object), positions


def _table_html(frame, table_id: str) -> str:
    table = flatten_table(frame)
    if table.shape[1] == 0 or len(table) == 0:
        return '<p class="empty">No rows.</p>'
    text, numeric_positions = _formatted(table)
    body = text.to_html(index=False, escape=True, na_rep="", border=0,
                        table_id=table_id, classes="data")
    rules = "".join(
        f"#{table_id} td:nth-child({i + 1}), #{table_id} th:nth-child({i + 1})"
        f" {{ text-align: right; }}\n"
        for i in numeric_positions
    )
    style = f"<style>\n{rules}</style>\n" if rules else ""
    return f'{style}<div class="table-wrap">\n{body}\n</div>'


def _headline_html(program) -> str:
    table = flatten_table(program)
    if len(table) == 0:
        return '<p class="empty">No totals.</p>'
    if not {"metric", "value"} <= set(table.columns):
        return _table_html(table, "program")
    cards = []
    for rec in table.to_dict("records"):
        value = rec.get("value")
        if is_number(value):
            shown = format_number(value, decimals_for([value], str(rec.get("unit", ""))))
        else:
            shown = "" if is_missing(value) else str(value)
        unit = rec.get("unit")
        unit_html = "" if is_missing(unit) or unit == "" else f'<span class="unit">{_e(unit)}</span>'
        cards.append(
            f'<div class="card"><div class="metric">{_e(rec["metric"])}</div>'
            f'<div class="value">{_e(shown)}{unit_html}</div></div>')
    return '<div class="cards">\n' + "\n".join(cards) + "\n</div>"


def _list_html(lines, empty: str) -> str:
    if not lines:
        return f'<p class="empty">{_e(empty)}</p>'
    return '<ul class="notes">\n' + "\n".join(f"<li>{_e(line)}</li>" for line in lines) + "\n</ul>"


def write_deployment_html(path, tables: dict, figures: dict | None = None, *,
                          title: str = "Deployment summary", warnings=None,
                          assumptions=None, cautions=None) -> Path:
    """Write the deployment report as one self-contained HTML file.

    Parameters
    ----------
    path : str or os.PathLike
        File to write; replaced if it exists.
    tables : dict of str to pandas.DataFrame
        As for :func:`fleet.report.excel.write_deployment_summary`:
        ``program`` (``metric``, ``value``, ``unit``), ``by_district``,
        ``by_depot``, ``sites``, ``kit_types``, ``comparisons``; any may be
        missing or empty.  Column names carry units.
    figures : dict of str to matplotlib.figure.Figure, optional
        Shown in the given order, each with its name as caption, as inline
        base64 PNG.
    title : str
    warnings, cautions : iterable of str, optional
        The standard cautions are always included.
    assumptions : DataFrame, mapping or iterable, optional
        ``key``, ``value``, ``unit``.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    tables = dict(tables or {})
    figures = dict(figures or {})
    warning_lines = normalise_lines(warnings)
    caution_lines = all_cautions(cautions)

    parts: list[str] = []
    nav = " ".join(f'<a href="#{key}">{_e(label)}</a>' for key, label in _SECTIONS)
    parts.append(f"<h1>{_e(title)}</h1>\n<nav>{nav}</nav>")
    parts.append('<div class="safety"><strong>Safety.</strong> '
                 f"{_e(caution_lines[0])} See <a href=\"#cautions\">Cautions</a>.</div>")
    if warning_lines:
        parts.append(f'<div class="safety"><strong>{len(warning_lines):,} warning'
                     f'{"s" if len(warning_lines) != 1 else ""}.</strong> '
                     'See <a href="#warnings">Warnings</a>.</div>')

    def section(key: str, label: str, content: str) -> None:
        parts.append(f'<section id="{key}">\n<h2>{_e(label)}</h2>\n{content}\n</section>')

    labels = dict(_SECTIONS)
    section("headline", labels["headline"], _headline_html(tables.get("program")))

    if figures:
        blocks = []
        for name, figure in figures.items():
            data = figure_to_base64_png(figure)
            blocks.append(f'<figure><img alt="{_e(name)}" src="data:image/png;base64,{data}">'
                          f"<figcaption>{_e(name)}</figcaption></figure>")
        section("figures", labels["figures"], "\n".join(blocks))
    else:
        section("figures", labels["figures"], '<p class="empty">No figures.</p>')

    for key in ("by_district", "by_depot", "kit_types", "comparisons"):
        section(key, labels[key], _table_html(tables.get(key), f"t_{key}"))
    section("warnings", labels["warnings"], _list_html(warning_lines, "No warnings."))
    section("sites", labels["sites"], _table_html(tables.get("sites"), "t_sites"))

    known = {"program", "by_district", "by_depot", "sites", "kit_types", "comparisons"}
    for i, (key, frame) in enumerate((k, v) for k, v in tables.items() if k not in known):
        section(f"extra_{i}", str(key), _table_html(frame, f"t_extra_{i}"))

    section("assumptions", labels["assumptions"],
            _table_html(normalise_assumptions(assumptions), "t_assumptions"))
    section("cautions", labels["cautions"], _list_html(caution_lines, ""))

    document = (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        + "\n".join(parts)
        + "\n</body>\n</html>\n"
    )
    path = Path(path)
    path.write_text(document, encoding="utf-8")
    return path
