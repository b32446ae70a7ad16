"""The sections of a `Diagnosis`, one module per family, and their registry.

Each module defines a `Section` (key, title, how it is computed from the `diagnose`
inputs, its text rows, readings, summary entries, "members needed" rows and figures) and
one instance, ``section``. `SECTIONS` lists them in report order: adding a diagnostic to
`diagnose` is one module here and one line below.
"""

from __future__ import annotations

from . import (
    correlation,
    decomposition,
    diversity,
    intervals,
    ordering,
    out_of_bag,
    reference,
    size_curve,
    spread,
    uncertainty,
)
from ._base import TOLERANCE, Figure, Inputs, Needed, Section

__all__ = ["SECTIONS", "TOLERANCE", "Figure", "Inputs", "Needed", "Section"]

#: Every section of a diagnosis, in the order of its report. A section may use the
#: results of the sections before it (the single model needs the decomposition's loss).
SECTIONS: list[Section] = [
    decomposition.section,
    reference.section,
    size_curve.section,
    correlation.section,
    out_of_bag.section,
    uncertainty.section,
    intervals.section,
    spread.section,
    diversity.section,
    ordering.section,
]
