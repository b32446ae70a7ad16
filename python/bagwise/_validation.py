"""Input checks shared by the public functions; messages name the argument in backticks."""

from __future__ import annotations

import contextlib
import numbers
import re
import secrets

import numpy as np

#: Largest count any integer option takes (the core reads them as 64-bit sizes).
LARGEST_COUNT = 2**63 - 1
#: Most threads ``n_jobs`` may ask for: a larger count is a typo, not a machine.
MAX_N_JOBS = 4096


def positive_int(value: object, name: str) -> int:
    """Return ``value`` as a Python int if it is a whole number in 1..`LARGEST_COUNT`
    (``OverflowError`` above)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"`{name}`: expected an integer, got {type(value).__name__}")
    value = int(value)
    if value < 1:
        raise ValueError(f"`{name}`: must be at least 1, got {value}")
    if value > LARGEST_COUNT:
        raise OverflowError(f"`{name}`: {value} does not fit in 64 bits")
    return value


def seed_value(seed: object) -> int:
    """A 64-bit seed; ``None`` draws a fresh one from the operating system."""
    if seed is None:
        return secrets.randbits(64)
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral):
        raise TypeError(f"`seed`: expected a non-negative integer or None, got {type(seed).__name__}")
    seed = int(seed)
    if not 0 <= seed < 2**64:
        raise ValueError(f"`seed`: must lie in [0, 2**64), got {seed}")
    return seed


def n_jobs_value(n_jobs: object) -> int | None:
    """``None`` or ``-1`` (all cores), or a positive thread count."""
    if n_jobs is None or (isinstance(n_jobs, int) and not isinstance(n_jobs, bool) and n_jobs == -1):
        return None
    n_jobs = positive_int(n_jobs, "n_jobs")
    if n_jobs > MAX_N_JOBS:
        raise ValueError(f"`n_jobs`: at most {MAX_N_JOBS} threads, got {n_jobs}")
    return n_jobs


def label_codes(labels: object, n_rows: int, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Factorise 1-D labels of any dtype into (codes as int64, unique labels).

    Raises ``ValueError`` for a wrong length, missing values (NaN/None) or more than one
    dimension.
    """
    try:
        array = np.asarray(labels)
    except (TypeError, ValueError) as err:
        raise TypeError(f"`{name}`: expected an array, got {type(labels).__name__} ({err})") from None
    if array.ndim != 1:
        raise ValueError(f"`{name}`: expected a 1-D array of labels, got shape {array.shape}")
    if array.shape[0] != n_rows:
        raise ValueError(f"`{name}`: has {array.shape[0]} labels but n_rows is {n_rows}")
    if array.dtype.kind == "f":
        if not np.all(np.isfinite(array)):
            raise ValueError(f"`{name}`: contains NaN or infinite labels")
    elif array.dtype.kind == "O":
        if any(v is None or (isinstance(v, float) and v != v) for v in array.tolist()):
            raise ValueError(f"`{name}`: contains missing labels (None or NaN)")
    elif array.dtype.kind not in "iubUS":
        raise TypeError(f"`{name}`: labels of dtype {array.dtype} are not supported")
    try:
        uniques, codes = np.unique(array, return_inverse=True)
    except TypeError as err:
        raise TypeError(f"`{name}`: labels must be mutually comparable ({err})") from None
    return codes.astype(np.int64, copy=False).reshape(-1), uniques


def renamed_arguments(error: Exception, names: dict[str, str]) -> Exception:
    """``error`` again, its leading backticked argument renamed by ``names`` (a call that
    passes its own argument on under another name reports the caller's name)."""
    message = str(error)
    for inner, outer in names.items():
        if message.startswith(f"`{inner}`"):
            message = f"`{outer}`" + message[len(inner) + 2:]
            break
    return type(error)(message)


def rng_seed(rng: object) -> int:
    """The 64-bit seed of the member streams from the one seed keyword ``rng`` (SPEC 7).

    An int seeds the streams directly; a ``numpy.random.Generator`` gives
    ``int(rng.integers(2**63))`` (advancing it); ``None`` draws a fresh seed from the
    operating system.
    """
    if isinstance(rng, np.random.Generator):
        return int(rng.integers(2**63))
    if rng is None:
        return secrets.randbits(64)
    if isinstance(rng, bool) or not isinstance(rng, numbers.Integral):
        raise TypeError("`rng`: expected a non-negative integer, a numpy.random.Generator or "
                        f"None, got {type(rng).__name__}")
    rng = int(rng)
    if not 0 <= rng < 2**64:
        raise ValueError(f"`rng`: must lie in [0, 2**64), got {rng}")
    return rng


# An input error of scikit-learn's checks about the targets rather than the features.
_ABOUT_TARGETS = re.compile(r"(^|\s)y\b|Input y|label|classes|inconsistent numbers of samples")


@contextlib.contextmanager
def naming(name: str, targets: str | None = None):
    """Errors of input checks that name no argument (scikit-learn's ``validate_data``, numpy
    conversions) raised again as a ``ValueError`` / ``TypeError`` whose message starts with
    ``name`` in backticks, or ``targets`` when the message is about the targets. A message
    that already starts with an argument in backticks passes unchanged."""
    try:
        yield
    except (ValueError, TypeError) as err:
        message = str(err)
        if message.startswith("`"):
            raise
        which = targets if targets and _ABOUT_TARGETS.search(message) else name
        kind = ValueError if isinstance(err, ValueError) else TypeError
        raise kind(f"`{which}`: {message}") from None
