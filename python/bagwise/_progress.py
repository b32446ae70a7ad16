"""Progress reporting shared by every long-running call."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

ProgressArg = bool | Callable[[int, int], object] | None


@contextmanager
def progress_callback(progress: ProgressArg, description: str) -> Iterator[Callable | None]:
    """Turn the user's ``progress`` argument into a ``callback(done, total)`` for the core.

    ``False``/``None`` gives no callback, ``True`` a tqdm bar (tqdm imported lazily), and a
    callable is passed through unchanged.
    """
    if progress is None or progress is False:
        yield None
        return
    if callable(progress):
        yield progress
        return
    if progress is not True:
        raise TypeError(f"`progress`: expected a bool or a callable, got {type(progress).__name__}")
    try:
        from tqdm.auto import tqdm
    except ImportError as err:  # pragma: no cover - depends on the environment
        raise ImportError("`progress=True` needs tqdm: pip install tqdm") from err
    bar = tqdm(desc=description, unit="member")

    def advance(done: int, total: int) -> None:
        bar.total = total
        bar.update(done - bar.n)

    try:
        yield advance
    finally:
        bar.close()
