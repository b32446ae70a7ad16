"""Plain-text and HTML rendering shared by the result objects."""

from __future__ import annotations

import html
from collections.abc import Sequence


def text_block(title: str, rows: Sequence[tuple[str, str]], reading: str = "") -> str:
    """A titled two-column block for ``__repr__``."""
    width = max((len(k) for k, _ in rows), default=0)
    lines = [title]
    lines += [f"  {key:<{width}}  {value}" for key, value in rows]
    if reading:
        lines.append(f"  -> {reading}")
    return "\n".join(lines)


def html_block(title: str, rows: Sequence[tuple[str, str]], reading: str = "") -> str:
    """The same block as a compact HTML table for notebooks."""
    cells = "".join(
        f"<tr><th style='text-align:left;padding-right:1em'>{html.escape(k)}</th>"
        f"<td style='text-align:right'>{html.escape(v)}</td></tr>"
        for k, v in rows
    )
    note = f"<p style='margin:0.3em 0'>{html.escape(reading)}</p>" if reading else ""
    return (
        f"<div class='bagwise-result'><strong>{html.escape(title)}</strong>"
        f"<table style='border-collapse:collapse'>{cells}</table>{note}</div>"
    )


def safe_html(obj: object, render) -> str:
    """Call ``render()``; on any failure fall back to the escaped ``repr`` (never raises)."""
    try:
        return render()
    except Exception:  # noqa: BLE001 - a display hook must never raise
        try:
            text = repr(obj)
        except Exception:  # noqa: BLE001
            text = f"<{type(obj).__name__}>"
        return f"<pre>{html.escape(text)}</pre>"


def fmt(value) -> str:
    """A number for a result's text block: 6 significant digits, ``nan``, ``-`` for None."""
    if value is None:
        return "-"
    if isinstance(value, float) and value != value:
        return "nan"
    return f"{value:.6g}"


def plus_minus(value: str, error: float, error_text: str) -> str:
    """``"value ± error"``, or the value with the reason there is no spread to show: a
    standard error of exactly 0 or NaN is never printed as "± 0"."""
    if error != error:
        return f"{value} (standard error n/a)"
    if error == 0:
        return f"{value} (same in every draw)"
    return f"{value} ± {error_text}"
