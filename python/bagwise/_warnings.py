"""The one warning category of bagwise and the helper every module warns through.

Each condition is warned once per public call and attributed to the caller's line (the
first frame outside the bagwise package), so ``-W error`` and ``warnings.catch_warnings``
see it where the user wrote the call, not inside bagwise.
"""

from __future__ import annotations

import os
import sys
import warnings

_PACKAGE_DIR = os.path.dirname(os.path.abspath(__file__))


class BagwiseWarning(UserWarning):
    """A figure bagwise returns is undefined, rough or not estimable from the input.

    The message names the argument or quantity and says what would make it estimable.
    """


def _outside_level() -> int:
    """The ``stacklevel`` of the first frame outside the bagwise package, counted from
    the caller of :func:`warn`."""
    frame = sys._getframe(2)
    level = 2
    while frame is not None:
        filename = os.path.abspath(frame.f_code.co_filename)
        if not filename.startswith(_PACKAGE_DIR + os.sep):
            return level
        frame = frame.f_back
        level += 1
    return level


def warn(message: str, category: type[Warning] = BagwiseWarning) -> None:
    """Warn ``message`` once, attributed to the user's line that called into bagwise."""
    warnings.warn(message, category, stacklevel=_outside_level())


class once_per_call:  # noqa: N801 - used as a context manager, reads like a function
    """Collapses repeated identical warnings raised inside the block into one.

    Results computed inside a public call (e.g. `diagnose` building several results) may
    each want to warn about the same condition; inside this block each distinct
    (category, message) is re-emitted once, at the user's line.
    """

    def __enter__(self):
        self._catcher = warnings.catch_warnings(record=True)
        self._records = self._catcher.__enter__()
        warnings.simplefilter("always")
        return self

    def __exit__(self, *exc):
        self._catcher.__exit__(*exc)
        seen = set()
        for record in self._records:
            key = (record.category, str(record.message))
            if key in seen:
                continue
            seen.add(key)
            warnings.warn(record.message, record.category, stacklevel=_outside_level())
        return False
