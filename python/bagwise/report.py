"""A self-contained HTML report of a `Diagnosis`: tables, readings, embedded figures.

The report is one HTML document with inline CSS and the figures embedded as base64 PNG
data URIs: no stylesheet, script, font or image is fetched, so it reads the same offline,
attached to an e-mail or archived next to a pipeline's outputs. Figures are drawn with
`bagwise.plots` when matplotlib is installed; without it the report still renders, with a
note on how to get them.
"""

from __future__ import annotations

import base64
import html
import io
import math
import warnings

from . import __version__
from ._display import html_block

__all__ = ["CAUTIONS", "render"]

#: The cautions printed at the foot of every report; the same text as the README's
#: "Cautions" section (a test keeps the two equal).
CAUTIONS = (
    "Diagnostics describe the data and the learners they were computed on. An out-of-bag "
    "error, a standard error or a \"members needed\" figure is an estimate for rows like the "
    "training rows; it is not a guarantee for deployment, where the data may drift, the rows "
    "may not be independent (use `groups=` or `block_length=` when they are not), and the "
    "model may be used outside the range it was fit on. Bootstrap-based standard errors are "
    "themselves noisy for small ensembles and small data sets."
)

_NO_PLOTS = ("Figures need matplotlib, an optional dependency: install it with "
             "<code>pip install bagwise[plots]</code>.")

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',Helvetica,Arial,sans-serif;
 max-width:60em;margin:2em auto;padding:0 1em;color:#1f1f1f;line-height:1.4}
h1{font-size:1.6em;margin-bottom:0.2em}h2{font-size:1.25em;border-bottom:1px solid #c9d3dc;
 padding-bottom:0.2em;margin-top:1.6em}
table{border-collapse:collapse;margin:0.4em 0}
th,td{padding:0.15em 0.8em 0.15em 0;vertical-align:top}
table.numbers td.value{text-align:right;font-variant-numeric:tabular-nums}
table.numbers tr.first td{border-top:1px solid #e3e8ee}
.bagwise-result{margin:0.6em 0}
figure{margin:0.8em 0}figure img{max-width:100%;height:auto}
figcaption{font-size:0.9em;color:#4a4a4a}
.note{color:#4a4a4a;font-style:italic}
footer{margin-top:2em;border-top:1px solid #c9d3dc;font-size:0.9em;color:#333}
"""


def format_number(value) -> str:
    """How the report and the command line print a number of `Diagnosis.summary`:
    6 significant digits, integers with thousands separators, None as a dash."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else f"{value:.6g}"
    return str(value)


def summary_rows(summary: dict) -> list[tuple[str, str, str]]:
    """``(section, quantity, value)`` rows of `Diagnosis.summary`, values formatted; the
    keys as they are (glossary names, the same as in the JSON summary)."""
    return [(section, quantity, format_number(value))
            for section, numbers in summary.items() for quantity, value in numbers.items()]


def _summary_table(summary: dict) -> str:
    rows, last = [], None
    for section, quantity, value in summary_rows(summary):
        first = section != last
        label = html.escape(section) if first else ""
        rows.append(f"<tr class='{'first' if first else 'rest'}'><th>{label}</th>"
                    f"<td>{html.escape(quantity)}</td><td class='value'>{html.escape(value)}</td></tr>")
        last = section
    return ("<table class='numbers'><tr><th>section</th><th>quantity</th><th>value</th></tr>"
            + "".join(rows) + "</table>")


# -- figures --------------------------------------------------------------------------------

def _png(draw, figsize=(6.4, 4.0)) -> str:
    """Draw on the axes of a new (pyplot-free) figure and return it as a PNG data URI."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=figsize, dpi=100, layout="constrained")
    draw(figure.subplots())
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", metadata={"Software": None})
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _figure(draw, caption, figsize=(6.4, 4.0)) -> str:
    try:
        with warnings.catch_warnings():
            # the diagnostics already warned about what the figures show
            warnings.simplefilter("ignore")
            uri = _png(draw, figsize)
    except ValueError as err:  # a figure that does not apply to these numbers
        return f"<p class='note'>{html.escape(caption)}: not drawn ({html.escape(str(err))})</p>"
    return (f"<figure><img src='{uri}' alt='{html.escape(caption)}'>"
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def _have_matplotlib() -> bool:
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return False
    return True


def _figures(diagnosis, unit) -> dict[str, list[str]]:
    """The figures each section supplies, drawn, by section key."""
    return {section.key: [_figure(figure.draw, figure.caption, figure.figsize)
                          for figure in section.figures(result, diagnosis, unit)]
            for section, result in diagnosis._present()}


# -- the document ---------------------------------------------------------------------------

def render(diagnosis, *, title=None, unit=None, figures=True) -> str:
    """The HTML report of ``diagnosis`` (see `Diagnosis.to_html`)."""
    title = title or "bagwise diagnosis"
    if not isinstance(title, str):
        raise TypeError(f"`title`: expected a string, got {type(title).__name__}")
    drawn: dict[str, list[str]] = {}
    note = ""
    if figures:
        if _have_matplotlib():
            drawn = _figures(diagnosis, unit)
        else:
            note = f"<p class='note'>{_NO_PLOTS}</p>"
    sections = [f"<section>{html_block(heading, rows, note)}"
                f"{''.join(drawn.get(key, []))}</section>"
                for key, heading, rows, note in diagnosis._parts()]
    readings = "".join(f"<li>{html.escape(line)}</li>" for line in diagnosis.readings())
    ensemble = diagnosis.summary()["ensemble"]
    head = (f"{html.escape(diagnosis.kind)}: {diagnosis.n_members:,} members x "
            f"{diagnosis.n_points:,} points"
            + (f", loss {html.escape(str(ensemble['loss']))}" if "loss" in ensemble else ""))
    needed = diagnosis._quiet_needed()
    needed_block = (f"<h2>Members needed</h2><p>{html.escape(needed._reading())}.</p>"
                    f"{needed._html()}" if len(needed) else "")
    return (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        f"<meta name='viewport' content='width=device-width, initial-scale=1'>"
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>"
        f"<h1>{html.escape(title)}</h1><p>{head}</p>"
        f"<h2>Readings</h2><ul>{readings}</ul>"
        f"<h2>Key numbers</h2>{_summary_table(diagnosis.summary())}{needed_block}"
        f"<h2>Sections</h2>{note}{''.join(sections)}"
        f"<footer><h2>Cautions</h2><p>{html.escape(CAUTIONS)}</p>"
        f"<p>bagwise {html.escape(__version__)}</p></footer>"
        "</body></html>\n"
    )
