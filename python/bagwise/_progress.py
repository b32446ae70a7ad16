"""Progress reporting and interruption shared by every long-running call."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from functools import wraps

ProgressArg = bool | Callable[[int, int], object] | None

#: Units a stage counts for in `stages`: the progress of a call made of several core calls
#: is reported on this scale per stage, so it stays monotone and ends at its total.
STAGE_UNITS = 1000


def progress_iv(progress: ProgressArg) -> None:
    """Refuse a ``progress`` that is neither a bool, None nor a callable."""
    if progress is None or isinstance(progress, bool) or callable(progress):
        return
    raise TypeError(f"`progress`: expected a bool or a callable, got {type(progress).__name__}")


@contextmanager
def progress_callback(progress: ProgressArg, description: str,
                      unit: str = "member") -> Iterator[Callable | None]:
    """Turn the user's ``progress`` argument into a ``callback(done, total)`` for the core.

    ``False``/``None`` gives no callback, ``True`` a tqdm bar (tqdm imported lazily) counting
    ``unit``, and a callable is passed through unchanged.
    """
    progress_iv(progress)
    if progress is None or progress is False:
        yield None
        return
    if progress is not True:
        yield progress
        return
    try:
        from tqdm.auto import tqdm
    except ImportError as err:  # pragma: no cover - depends on the environment
        raise ImportError("`progress=True` needs tqdm: pip install tqdm") from err
    bar = tqdm(desc=description, unit=unit)

    def advance(done: int, total: int) -> None:
        bar.total = total
        bar.update(done - bar.n)

    try:
        yield advance
    finally:
        bar.close()


def stages(callback: Callable | None, n_stages: int) -> list[Callable | None]:
    """One callback per consecutive stage of a call made of ``n_stages`` core calls (or
    Python steps): stage ``i`` reporting ``(done, total)`` is passed on as
    ``(i * STAGE_UNITS + STAGE_UNITS * done // total, n_stages * STAGE_UNITS)``, so the
    whole call reports one monotone count; `finish` reports the end."""
    if callback is None:
        return [None] * n_stages
    whole = n_stages * STAGE_UNITS
    last = [0]

    def stage(i: int) -> Callable:
        def report(done: int, total: int) -> None:
            share = STAGE_UNITS if total <= 0 else min(STAGE_UNITS, STAGE_UNITS * done // total)
            value = max(last[0], i * STAGE_UNITS + share)
            last[0] = value
            callback(value, whole)
        return report

    return [stage(i) for i in range(n_stages)]


def finish(callback: Callable | None, total: int) -> None:
    """Report ``(total, total)`` (a call's last report)."""
    if callback is not None:
        callback(total, total)


def all_or_nothing(update: Callable) -> Callable:
    """Wrap a stream's ``update`` so it changes the stream only when it returns: on any
    exception (a bad chunk, Ctrl-C mid-chunk) the stream's attributes are put back as they
    were. The core states are all-or-nothing themselves; this covers the Python side (a
    first chunk's set-up)."""

    @wraps(update)
    def guarded(self, *args, **kwargs):
        saved = dict(self.__dict__)
        try:
            return update(self, *args, **kwargs)
        except BaseException:
            self.__dict__.clear()
            self.__dict__.update(saved)
            raise

    return guarded


@contextmanager
def reporting(stream, callback: Callable | None):
    """Let ``stream``'s core updates report to ``callback`` for the duration (the stream
    itself never keeps it, so it pickles as before)."""
    stream._callback = callback
    try:
        yield stream
    finally:
        stream.__dict__.pop("_callback", None)
