"""The shared base of bagwise's frozen result objects.

A result is a frozen dataclass: its fields are the numpydoc ``Attributes``; subclasses
give a ``_title``, the ``_rows()`` of their text block and a plain-word ``_reading()``;
``__repr__`` and ``_repr_html_`` (which never raises) come from here.
"""

from __future__ import annotations

import dataclasses
import math
from typing import ClassVar

from ._display import html_block, safe_html, text_block
from ._warnings import warn


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Result:
    """Base of every result: frozen fields, text and HTML display."""

    _title: ClassVar[str] = "Result"

    def _rows(self) -> list[tuple[str, str]]:
        return []

    def _reading(self) -> str:
        return ""

    def __repr__(self) -> str:
        return text_block(self._title, self._rows(), self._reading())

    def _repr_html_(self) -> str:
        return safe_html(self, lambda: html_block(self._title, self._rows(), self._reading()))


def check_tolerance(tolerance: object) -> float:
    """The ``tolerance`` of every ``members_needed``: a float in (0, 1)."""
    try:
        value = float(tolerance)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise TypeError(f"`tolerance`: expected a number, got {type(tolerance).__name__}") from None
    if not 0 < value < 1:
        raise ValueError(f"`tolerance`: must be in (0, 1), got {tolerance!r}")
    return value


def not_estimable(why: str) -> float:
    """The edge behaviour of every ``members_needed``: NaN with one warning saying why."""
    warn(f"members_needed: not estimable: {why}")
    return math.nan


def members_for(excess_at_one: float, limit: float, tolerance: float, why_not: str) -> int | float:
    """Smallest integer M >= 1 with ``excess_at_one / M <= tolerance * limit``.

    ``excess_at_one`` is the part that shrinks as 1/M (its value at one member) and
    ``limit`` the infinite-ensemble value it is compared with; NaN with one warning
    (``why_not``) when either is not finite or ``limit`` is not positive.
    """
    if not (math.isfinite(excess_at_one) and math.isfinite(limit)) or limit <= 0:
        return not_estimable(why_not)
    return max(1, math.ceil(max(excess_at_one, 0.0) / (tolerance * limit)))
