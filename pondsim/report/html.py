"""HTML building blocks of the report page: escaping, numbers, cells, tables, embedded
figures, units and sections."""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path

import pandas as pd

#: The page's sections in order: (id, heading). Each is one <section> with one <h2>.
SECTIONS = (
    ("summary", "Summary"),
    ("question", "The question and the site"),
    ("headline", "Headline numbers"),
    ("monthly", "The monthly picture"),
    ("harvest", "Harvest plan by season"),
    ("crash", "Crash-risk calendar"),
    ("inputs", "Inputs bill"),
    ("sensitivity", "Sensitivity: which assumptions move the answer"),
    ("assumptions", "Assumptions and parameters"),
    ("methods", "Method notes"),
    ("limitations", "Limitations and cautions"),
)


def read_table(path, index_col=None) -> pd.DataFrame:
    """A CSV written by :func:`pondsim.results.files.write_csv` (leading caution comment)."""
    with open(path, encoding="utf-8") as fh:
        skip = 1 if fh.readline().startswith("#") else 0
    return pd.read_csv(path, skiprows=skip, index_col=index_col, keep_default_na=False,
                       na_values=[""])


def esc(text) -> str:
    """HTML-escaped text (quotes too, so that it is safe in attributes)."""
    return html.escape(str(text), quote=True)


def _num(v, digits: int = 1, *, pct: bool = False) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return esc(v)
    if not math.isfinite(v):
        return "—"
    if pct:
        v *= 100
    return f"{v:,.{digits}f}"


def _td(v, digits: int = 1, *, col: str | None = None, pct: bool = False) -> str:
    """A numeric cell; ``data-value`` holds the CSV value, ``data-col`` its column."""
    attrs = ' class="num"'
    if col is not None:
        attrs += f' data-col="{esc(col)}" data-value="{esc(repr(float(v)))}"'
    return f"<td{attrs}>{_num(v, digits, pct=pct)}</td>"


def _text_td(v, *, nowrap: bool = False) -> str:
    return f'<td class="nowrap">{esc(v)}</td>' if nowrap else f"<td>{esc(v)}</td>"


def _table(headers, rows, *, caption: str, table_id: str | None = None,
           row_attrs=None, widths=None) -> str:
    """A table; *headers* are plain text (with units), *rows* lists of cell HTML;
    *widths* [% of the line] fix the column widths (long text wraps inside them)."""
    head = "".join(f'<th scope="col">{esc(h)}</th>' for h in headers)
    cols = ""
    if widths:
        cols = "<colgroup>" + "".join(f'<col style="width: {w}%">' for w in widths) \
            + "</colgroup>"
    body = []
    for i, cells in enumerate(rows):
        attrs = row_attrs[i] if row_attrs else ""
        body.append(f"<tr{attrs}>{''.join(cells)}</tr>")
    tid = f' id="{esc(table_id)}"' if table_id else ""
    fixed = ' class="fixed"' if widths else ""
    return (f'<div class="wide"><table{tid}{fixed}><caption>{esc(caption)}</caption>{cols}'
            f"<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table></div>")


def _figure(out_dir: Path, name: str, alt: str, caption: str) -> str:
    path = out_dir / name
    if not path.is_file():
        return ""
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{esc(alt)}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def _p(text: str, cls: str | None = None) -> str:
    c = f' class="{cls}"' if cls else ""
    return f"<p{c}>{esc(text)}</p>"


def _month_name(m) -> str:
    return pd.Timestamp(2000, int(m), 1).strftime("%b")


UNIT_TEXT = {"g m-2 d-1": "g m⁻² d⁻¹", "g m-3": "g m⁻³", "m2": "m²", "m3": "m³",
             "d-1": "d⁻¹", "m-1": "m⁻¹", "m2 g-1": "m² g⁻¹", "umol m-2 s-1": "µmol m⁻² s⁻¹",
             "umol J-1": "µmol J⁻¹", "degC": "°C", "W m-2": "W m⁻²", "W m-2 K-1": "W m⁻² K⁻¹",
             "m s-1": "m s⁻¹", "m3 d-1": "m³ d⁻¹", "kWh m-2 d-1": "kWh m⁻² d⁻¹",
             "kJ g-1": "kJ g⁻¹", "kg C kg-1": "kg C kg⁻¹", "kg N kg-1": "kg N kg⁻¹",
             "kg P kg-1": "kg P kg⁻¹", "s m-1/3": "s m⁻¹ᐟ³", "h d-1": "h d⁻¹", "1": "–"}


def _unit(u: str) -> str:
    return UNIT_TEXT.get(u, u)


def section_number(sid: str) -> int:
    """The printed number of the section with id *sid* (1-based)."""
    return [s for s, _ in SECTIONS].index(sid) + 1


def _section(index: int, body: list[str]) -> str:
    sid, title = SECTIONS[index]
    cls = ' class="major"' if index else ""
    return (f'<section id="{sid}"{cls}>\n<h2>{index + 1}. {esc(title)}</h2>\n'
            + "\n".join(body) + "\n</section>")


def _describe(scenario, name: str) -> str:
    from pondsim.studies.tune import describe

    for p in scenario.policies:
        if p.name == name:
            return describe(p)
    for plan in scenario.plans:
        if plan.name == name:
            return "season plan: " + "; ".join(f"{s}: {p}"
                                               for s, p in plan.policy_by_season.items())
    return ""

