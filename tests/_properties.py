"""Generated bad input on every public call: the table of calls, the mutations, the contract.

Each `Call` of `CALLS` is one public entry point with a valid baseline (`Call.base`, small
fixed arrays) and, per argument, a hypothesis strategy of `Bad` replacements. A case replaces
ONE argument of the baseline with one generated value and runs the call; `outcome` then checks
the one contract every case must satisfy:

- accepted: every number of the result is finite, or the call emitted `BagwiseWarning`s
  (each text once) saying why a figure is NaN; no other warning (an unnamed RuntimeWarning of
  numpy is a leak); the result's ``repr``, ``_repr_html_``, ``to_frame()`` and ``summary()``
  work; and a replacement holding the same numbers in another layout (float32, Fortran order,
  strided, reversed strides, read-only, big-endian, a narrower integer dtype, pandas, a list)
  gives the numbers of the plain float64 / int64 C-contiguous copy, which is called as an
  independent reference;
- refused: ``ValueError``, ``TypeError``, ``OverflowError`` or ``MemoryError`` whose message
  starts with an argument of the call in backticks;
- anything else is a crash: a pyo3 ``PanicException``, ``IndexError``, ``KeyError``,
  ``ZeroDivisionError``, ``AttributeError``, ``numpy.linalg.LinAlgError``, a message without
  the argument's name, a silent NaN.

`TALLY` counts, per call, the cases tried, accepted, refused and crashed; the conftest prints
it at the end of the session (and writes it as JSON when ``BAGWISE_PROPERTIES_SUMMARY`` names
a file).
"""

from __future__ import annotations

import contextlib
import dataclasses
import io
import math
import os
import pickle
import re
import sys
import tempfile
import warnings
from collections import Counter
from collections.abc import Callable
from typing import Any

import numpy as np
from hypothesis import reject
from hypothesis import strategies as st

import bagwise
from bagwise import BagwiseWarning

#: per call: Counter of "tried", "accepted", "refused", "crashes"
TALLY: dict[str, Counter] = {}

DOCUMENTED = (ValueError, TypeError, OverflowError, MemoryError)
_NAMED = re.compile(r"`([A-Za-z_][A-Za-z0-9_]*)`")


class Crash(AssertionError):
    """A case that broke the contract."""


# -- replacements ---------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class Bad:
    """One replacement of an argument: ``make(baseline) -> value``. ``same`` says the value
    holds the same numbers as its plain float64 / int64 C-contiguous copy (a layout)."""

    label: str
    make: Callable[[Any], Any]
    same: bool = False

    def __repr__(self) -> str:
        return self.label


def plain(value):
    """The independent reference input: the same numbers as a float64 (float or complex
    input) or int64 (integer input) C-contiguous ndarray."""
    array = np.asarray(value)
    if array.dtype.kind == "f":
        return np.ascontiguousarray(array, dtype=np.float64)
    if array.dtype.kind in "iu":
        return np.ascontiguousarray(array, dtype=np.int64)
    return np.array(array)


def _strided(a):
    a = np.asarray(a)
    if a.ndim == 0:
        return a
    wide = np.zeros(a.shape[:-1] + (2 * a.shape[-1],), dtype=a.dtype)
    wide[..., ::2] = a
    return wide[..., ::2]


def _reversed(a):
    a = np.asarray(a)
    return a if a.ndim == 0 else np.ascontiguousarray(a[::-1])[::-1]


def _readonly(a):
    a = np.array(a)
    a.flags.writeable = False
    return a


def _pandas(a):
    import pandas as pd

    a = np.asarray(a)
    if a.ndim == 1:
        return pd.Series(a)
    if a.ndim == 2:
        return pd.DataFrame(a)
    return a.tolist()


def _narrow(a):
    a = np.asarray(a)
    if a.dtype.kind not in "iu" or a.size == 0:
        return a
    for dtype in (np.uint8, np.int8, np.uint16, np.int16, np.int32):
        info = np.iinfo(dtype)
        if a.min() >= info.min and a.max() <= info.max:
            return a.astype(dtype)
    return a


def layouts(kind: str) -> list[Bad]:
    """The same numbers in other layouts and dtypes; ``kind`` is "float" or "int"."""
    out = [
        Bad("fortran", lambda a: np.asfortranarray(a), True),
        Bad("strided", _strided, True),
        Bad("negative strides", _reversed, True),
        Bad("read-only", _readonly, True),
        Bad("big-endian", lambda a: np.asarray(a).astype(np.asarray(a).dtype.newbyteorder(">")),
            True),
        Bad("pandas", _pandas, True),
        Bad("list", lambda a: np.asarray(a).tolist(), True),
    ]
    if kind == "float":
        out.append(Bad("float32", lambda a: np.asarray(a, dtype=np.float32), True))
    else:
        out.append(Bad("narrow integers", _narrow, True))
    return out


def _cast(dtype):
    def make(a):
        a = np.asarray(a)
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if np.dtype(dtype).kind in "iu" and a.dtype.kind == "f":
                a = np.nan_to_num(np.round(a), nan=0.0, posinf=0.0, neginf=0.0)
            return a.astype(dtype)
    return make


DTYPES = [
    Bad("float16", _cast(np.float16)), Bad("float64", _cast(np.float64)),
    Bad("int64", _cast(np.int64)), Bad("int8", _cast(np.int8)), Bad("uint64", _cast(np.uint64)),
    Bad("bool", _cast(np.bool_)), Bad("object", _cast(object)),
    Bad("complex", _cast(np.complex128)), Bad("strings", _cast(str)),
    Bad("datetime", lambda a: np.zeros(np.shape(a), dtype="datetime64[s]")),
]


def _axis_take(axis: int, how: str):
    def make(a):
        a = np.asarray(a)
        if a.ndim <= axis:
            return a
        n = a.shape[axis]
        index = {"empty": slice(0, 0), "one": slice(0, 1), "drop last": slice(0, max(n - 1, 0)),
                 "add one": None}[how]
        if index is None:
            return np.concatenate([a, np.take(a, [0], axis=axis)], axis=axis)
        return a[(slice(None),) * axis + (index,)]
    return make


def shapes(ndim: int) -> list[Bad]:
    out = [
        Bad("add axis", lambda a: np.asarray(a)[..., None]),
        Bad("leading axis", lambda a: np.asarray(a)[None]),
        Bad("drop axis", lambda a: np.asarray(a)[0] if np.ndim(a) else a),
        Bad("transposed", lambda a: np.asarray(a).T),
        Bad("0-d", lambda a: np.asarray(a).reshape(-1)[0] if np.size(a) else np.float64(1.0)),
        Bad("scalar", lambda a: 1.0),
        Bad("None", lambda a: None),
        Bad("a string", lambda a: "members.npy"),
        Bad("ragged list", lambda a: [[1.0, 2.0], [3.0]]),
    ]
    for axis in range(ndim):
        for how in ("empty", "one", "drop last", "add one"):
            out.append(Bad(f"{how} along axis {axis}", _axis_take(axis, how)))
    return out


FLOAT_VALUES = [math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, 1e-310, 0.0, -1.0, 2.0,
                1e15, -0.0]
INT_VALUES = [-1, -(2**31), 2**31, 2**40, 2**62, 0, 1, 255, 256]


def _put(value):
    def build(index):
        def make(a):
            a = np.array(a)
            if a.size == 0:
                return a
            if a.dtype.kind in "iu" and isinstance(value, float):
                a = a.astype(np.float64)
            if a.dtype.kind in "iu" and not np.can_cast(np.min_scalar_type(value), a.dtype):
                a = a.astype(np.int64)
            a.reshape(-1)[index % a.size] = value
            return a
        return make
    return build


def values(kind: str) -> st.SearchStrategy:
    """One entry set to an edge value (at a generated position), or the whole array scaled,
    made constant or negated."""
    pool = FLOAT_VALUES if kind == "float" else INT_VALUES + FLOAT_VALUES[:3]
    one = st.builds(lambda v, i: Bad(f"entry {i} = {v!r}", _put(v)(i)),
                    st.sampled_from(pool), st.integers(0, 10**6))
    whole = st.sampled_from([
        Bad("all zero", lambda a: np.zeros_like(np.asarray(a))),
        Bad("all one", lambda a: np.ones_like(np.asarray(a))),
        Bad("constant", lambda a: np.full_like(np.asarray(a), np.asarray(a).reshape(-1)[0])
            if np.size(a) else a),
        Bad("negated", lambda a: -np.asarray(a)),
        Bad("times 1e300", lambda a: np.asarray(a) * 1e300),
        Bad("times 1e-300", lambda a: np.asarray(a) * 1e-300),
        Bad("all NaN", lambda a: np.full(np.shape(a), np.nan)),
    ])
    return st.one_of(one, whole)


def array_bad(kind: str, ndim: int, extra: list[Bad] | None = None) -> st.SearchStrategy:
    """Every replacement of an array argument: layouts, dtypes, shapes, values."""
    fixed = layouts(kind) + DTYPES + shapes(ndim) + (extra or [])
    return st.one_of(st.sampled_from(fixed), values(kind))


def indices_for_counts(n_rows: int) -> Bad:
    """Drawn row indices where in-bag counts belong (a sklearn ``estimators_samples_``)."""
    def make(a):
        a = np.asarray(a)
        rng = np.random.default_rng(0)
        return rng.integers(0, max(n_rows, 1) * 10, size=a.shape)
    return Bad("row indices", make)


def weights_of(counts_shape) -> Bad:
    return Bad("row weights", lambda a: np.random.default_rng(0).dirichlet(
        np.ones(np.shape(a)[-1]), size=np.shape(a)[0]) * np.shape(a)[-1])


OPTION_POOL = [0, -1, -2, 1.5, True, False, "2", "nonsense", None, 2**70, -(2**70), math.nan,
               math.inf, [], (), {}, object(), np.int64(2), np.float64(0.5), b"x"]


def option(*valid) -> st.SearchStrategy:
    """A keyword replaced by a generic bad value or one of ``valid`` (documented values)."""
    pool = [v for v in OPTION_POOL] + list(valid)
    return st.sampled_from(pool).map(lambda v: Bad(f"{v!r}", lambda _a, v=v: v))


def n_jobs_bad() -> st.SearchStrategy:
    return option(1, 2, 4, -1, 0.0, 3.0, np.int32(2))


def floats_option(*valid) -> st.SearchStrategy:
    generated = st.floats(allow_nan=True, allow_infinity=True).map(
        lambda v: Bad(f"{v!r}", lambda _a, v=v: v))
    return st.one_of(option(*valid), generated)


# -- the contract ---------------------------------------------------------------------------

#: Result fields documented as NaN where they are not defined, with no warning of their own
#: (their status or a later call says it): rho where the members agree exactly.
# MemberOrder.honest_curve: all NaN when the caller asked for none (folds=None).
NAN_DOCUMENTED = {"Spread.rho", "Spread.pooled_rho", "MemberOrder.honest_curve"}


def numbers(value, seen=None, depth=0, *, documented_nan=True) -> list[np.ndarray]:
    """Every number of a result, as float64 arrays (fields of results, arrays, tuples,
    dicts; pandas objects and text are not numbers); without the `NAN_DOCUMENTED` fields
    when ``documented_nan`` is False."""
    seen = set() if seen is None else seen
    if id(value) in seen or depth > 6:
        return []
    seen.add(id(value))
    if isinstance(value, (bool, np.bool_)):
        return [np.array([float(value)])]
    if isinstance(value, (int, float, np.integer, np.floating)):
        return [np.array([float(value)])]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "fiub":
            return [np.asarray(value, dtype=np.float64).reshape(-1)]
        if value.dtype.kind == "O":
            return [x for v in value.reshape(-1)[:1000]
                for x in numbers(v, seen, depth + 1, documented_nan=documented_nan)]
        return []
    if isinstance(value, dict):
        return [x for k in sorted(value, key=str)
                for x in numbers(value[k], seen, depth + 1, documented_nan=documented_nan)]
    if isinstance(value, (list, tuple)):
        return [x for v in value
                for x in numbers(v, seen, depth + 1, documented_nan=documented_nan)]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return [x for f in dataclasses.fields(value) if not f.name.startswith("_") and (
                    documented_nan or f"{type(value).__name__}.{f.name}" not in NAN_DOCUMENTED)
                for x in numbers(getattr(value, f.name), seen, depth + 1,
                                 documented_nan=documented_nan)]
    return []


def exercise(result) -> None:
    """The displays of a result: ``repr``, ``_repr_html_`` (never raises), ``to_frame()``,
    ``summary()``; each must give its type."""
    items = result if isinstance(result, tuple) else (result,)
    for item in items:
        if hasattr(item, "_repr_html_"):
            assert isinstance(repr(item), str)
            html = item._repr_html_()
            if not isinstance(html, str):
                raise Crash(f"_repr_html_ gave {type(html).__name__}")
        if hasattr(item, "to_frame"):
            item.to_frame()
        if hasattr(item, "summary") and not isinstance(item, np.ndarray):
            item.summary()


@dataclasses.dataclass
class Outcome:
    kind: str  # "accepted" or "refused"
    result: Any = None
    error: BaseException | None = None
    warned: tuple[str, ...] = ()


def attempt(call: Call, args: dict) -> Outcome:
    """Run ``call`` on ``args``; a crash raises `Crash`, anything documented is returned."""
    # numpy's defaults, made explicit: underflow to 0 or a subnormal is not an error
    with warnings.catch_warnings(record=True) as caught, np.errstate(
            divide="warn", over="warn", invalid="warn", under="ignore"):
        warnings.simplefilter("always")
        try:
            result = call.run(args)
            exercise(result)
        except Crash:
            raise
        except DOCUMENTED + call.documented as err:
            outcome = Outcome("refused", error=err)
        except (KeyboardInterrupt, SystemExit):
            raise
        except BaseException as err:  # a pyo3 PanicException is a BaseException
            raise Crash(f"{type(err).__module__}.{type(err).__name__}: {err}") from err
        else:
            outcome = Outcome("accepted", result=result)
    others = [w for w in caught if not issubclass(w.category, BagwiseWarning)]
    if others:
        w = others[0]
        raise Crash(f"a {w.category.__name__} leaked: {w.message} ({w.filename}:{w.lineno})")
    texts = [str(w.message) for w in caught]
    repeated = [t for t, n in Counter(texts).items() if n > 1]
    if repeated:
        raise Crash(f"a BagwiseWarning was emitted {Counter(texts)[repeated[0]]} times: "
                    f"{repeated[0]}")
    outcome.warned = tuple(texts)
    if outcome.kind == "refused":
        message = str(outcome.error)
        named = _NAMED.match(message)
        if not named or named.group(1) not in call.names:
            raise Crash(f"{type(outcome.error).__name__} without an argument of "
                        f"{call.name} in backticks first: {message!r}")
    elif call.check is not None:
        call.check(outcome.result)
    else:
        nan = [a for a in numbers(outcome.result, documented_nan=False)
               if not np.all(np.isfinite(a))]
        if nan and not outcome.warned:
            raise Crash(f"silent NaN or infinity in the result (no BagwiseWarning): "
                        f"{nan[0][:8]}")
    return outcome


def _same(a: list[np.ndarray], b: list[np.ndarray], rtol: float) -> bool:
    return len(a) == len(b) and all(
        x.shape == y.shape and np.allclose(x, y, rtol=rtol, atol=1e-12 * max(1.0, rtol),
                                           equal_nan=True) for x, y in zip(a, b))


def run_case(call: Call, argument: str, bad: Bad) -> Outcome:
    """One generated case: the baseline with ``argument`` replaced, checked, tallied."""
    tally = TALLY.setdefault(call.name, Counter())
    tally["tried"] += 1
    if os.environ.get("BAGWISE_PROPERTIES_TRACE"):  # the last case before a hard crash
        print(f"case {call.name}({argument}={bad.label})", file=sys.stderr, flush=True)
    args = call.base()
    start = args.get(argument)
    if start is None:
        start = call.templates.get(argument.removeprefix("opt_"))
    try:
        args[argument] = bad.make(start)
    except Exception:  # a replacement that does not apply to this argument
        tally["tried"] -= 1
        reject()
    try:
        outcome = attempt(call, args)
        if bad.same:
            reference_args = call.base()
            reference_args[argument] = plain(args[argument])
            reference = attempt(call, reference_args)
            if reference.kind != outcome.kind:
                raise Crash(f"{bad.label} {outcome.kind} but its plain copy {reference.kind}: "
                            f"{outcome.error or reference.error}")
            if outcome.kind == "accepted":
                rtol = 1e-5 if "float32" in bad.label else 1e-9
                if not _same(numbers(outcome.result), numbers(reference.result), rtol):
                    raise Crash(f"{bad.label} gives other numbers than its plain float64 / "
                                "int64 C-contiguous copy")
    except Crash as crash:
        tally["crashes"] += 1
        raise Crash(f"{call.name}({argument}={bad.label}): {crash}") from crash.__cause__
    tally[outcome.kind] += 1
    return outcome


# -- the table of calls ---------------------------------------------------------------------

@dataclasses.dataclass
class Call:
    """A public entry point: ``run(args)`` from a fresh baseline ``base()``; ``bad`` the
    replacement strategies per argument; ``names`` the argument names a message may start
    with (every key of the baseline and ``also``); ``weight`` its share of the examples."""

    name: str
    run: Callable[[dict], Any]
    base: Callable[[], dict]
    bad: dict[str, st.SearchStrategy]
    also: tuple[str, ...] = ()
    weight: float = 1.0
    templates: dict[str, Any] = dataclasses.field(default_factory=lambda: dict(TEMPLATES))
    documented: tuple[type[BaseException], ...] = ()
    #: for a result whose NaN entries are documented as a mask (e.g. the in-bag entries of
    #: out-of-bag predictions): ``check(result)`` raises `Crash` when they are misplaced,
    #: and the generic NaN check is skipped
    check: Callable[[Any], None] | None = None

    @property
    def names(self) -> set[str]:
        return set(self.base()) | set(self.also)

    def cases(self) -> st.SearchStrategy:
        return st.sampled_from(sorted(self.bad)).flatmap(
            lambda argument: st.tuples(st.just(argument), self.bad[argument]))


M, P, R, C = 8, 9, 20, 3  # members, points, training rows, classes
_rng = np.random.default_rng(20261203)
VALUES = _rng.normal(size=(M, P))
Y = _rng.normal(size=P)
PROBS = _rng.dirichlet(np.ones(C), size=(M, P))
LABELS = _rng.integers(0, C, size=(M, P))
Y_LABELS = _rng.integers(0, C, size=P)
COUNTS = bagwise.resample(R, M, rng=3).counts
TRAIN = _rng.normal(size=(M, R))
Y_TRAIN = _rng.normal(size=R)
TRAIN_PROBS = _rng.dirichlet(np.ones(C), size=(M, R))
TRAIN_LABELS = _rng.integers(0, C, size=(M, R))
Y_TRAIN_LABELS = _rng.integers(0, C, size=R)
REPLICATES = _rng.normal(size=(3, M, P))
X = _rng.normal(size=(30, 3))
X_NEW = _rng.normal(size=(7, 3))
Y_X = X[:, 0] + 0.5 * _rng.normal(size=30)
Y_X_LABELS = (X[:, 0] > 0).astype(np.int64) + (X[:, 1] > 0.5)


#: what array replacements start from where the baseline of an argument is None
TEMPLATES = {"member_weights": np.full(M, 1 / M), "point_weights": np.ones(R), "reference": Y,
             "X": X_NEW, "strata": np.arange(R) % 2, "groups": np.arange(R) // 5,
             "sizes": np.array([1, 2, M])}


def _copy(**kwargs) -> Callable[[], dict]:
    def base():
        return {k: (v.copy() if isinstance(v, np.ndarray) else v) for k, v in kwargs.items()}
    return base


def _fn(function, *positional) -> Callable[[dict], Any]:
    """Call ``function`` with the arguments named in ``positional`` by position, the rest by
    keyword."""
    def run(args):
        args = dict(args)
        first = [args.pop(p) for p in positional]
        return function(*first, **args)
    return run


MEMBERS = {"values": (VALUES, Y, TRAIN, Y_TRAIN), "probabilities": (PROBS, Y_LABELS, TRAIN_PROBS,
           Y_TRAIN_LABELS), "labels": (LABELS, Y_LABELS, TRAIN_LABELS, Y_TRAIN_LABELS)}


def members_bad(kind: str) -> st.SearchStrategy:
    if kind == "labels":
        return array_bad("int", 2, [Bad("labels as floats", lambda a: np.asarray(a, float))])
    extra = [Bad("labels of the predictions", lambda a: np.argmax(a, axis=-1)
                 if np.ndim(a) == 3 else np.round(a).astype(np.int64))]
    return array_bad("float", 3 if kind == "probabilities" else 2, extra)


def targets_bad(kind: str) -> st.SearchStrategy:
    return array_bad("float" if kind == "values" else "int", 1,
                     [Bad("class labels as strings", lambda a: np.asarray(a).astype(str))])


COUNTS_BAD = array_bad("int", 2, [indices_for_counts(R), weights_of(COUNTS.shape),
                                  Bad("mask", lambda a: np.asarray(a) > 0),
                                  Bad("transposed counts", lambda a: np.asarray(a).T.copy())])
WEIGHTS_BAD = st.one_of(array_bad("float", 1), option(np.full(M, 1 / M), [1.0] + [0.0] * (M - 1)))
LOSSES = ("squared_error", "absolute_error", "brier_score", "error_rate", "log_loss")


def function_calls() -> list[Call]:
    calls = []
    for kind, (members, y, train, y_train) in MEMBERS.items():
        mb, yb = members_bad(kind), targets_bad(kind)
        if kind == "labels":
            calls.append(Call(f"vote_fractions[{kind}]", _fn(bagwise.vote_fractions, "members"),
                              _copy(members=members, n_classes=None, member_weights=None,
                                    n_jobs=None),
                              {"members": mb, "n_classes": option(3, 4, 1, 2**21),
                               "member_weights": WEIGHTS_BAD, "n_jobs": n_jobs_bad()}))
        calls.append(Call(f"aggregate[{kind}]", _fn(bagwise.aggregate, "members"),
                          _copy(members=members, member_weights=None, n_classes=None, n_jobs=None),
                          {"members": mb, "member_weights": WEIGHTS_BAD,
                           "n_classes": option(3, 4, 1, 2**21), "n_jobs": n_jobs_bad()}))
        calls.append(Call(f"decompose[{kind}]", _fn(bagwise.decompose, "members", "y"),
                          _copy(members=members, y=y, loss=None, member_weights=None, n_jobs=None),
                          {"members": mb, "y": yb, "loss": option(*LOSSES),
                           "member_weights": WEIGHTS_BAD, "n_jobs": n_jobs_bad()}))
        if kind != "probabilities":
            calls.append(Call(f"size_curve[{kind}]", _fn(bagwise.size_curve, "members", "y"),
                              _copy(members=members, y=y, sizes=None, orders=3, rng=0, loss=None,
                                    n_jobs=None),
                              {"members": mb, "y": yb, "loss": option(*LOSSES),
                               "sizes": st.one_of(array_bad("int", 1), option([1, 2], [M], [M + 1],
                                                                              [0], [-1], [2**62])),
                               "orders": option(1, 2, 10**12), "rng": option(
                                   1, 2**64 - 1, 2**64, np.random.default_rng(0)),
                               "n_jobs": n_jobs_bad()}))
        if kind != "values":
            calls.append(Call(f"diversity[{kind}]", _fn(bagwise.diversity, "members", "y"),
                              _copy(members=members, y=y, n_classes=None, n_jobs=None),
                              {"members": mb, "y": yb, "n_classes": option(3, 4, 1, 2**21),
                               "n_jobs": n_jobs_bad()}))
        calls.append(Call(f"out_of_bag[{kind}]", _fn(bagwise.out_of_bag, "members", "counts", "y"),
                          _copy(members=train, counts=COUNTS, y=y_train, loss=None,
                                point_weights=None, n_jobs=None, sizes=None),
                          {"members": mb, "counts": COUNTS_BAD, "y": yb,
                           "loss": option(*LOSSES),
                           "point_weights": st.one_of(array_bad("float", 1), option(np.ones(R))),
                           "sizes": st.one_of(array_bad("int", 1), option([1, 2], [M + 1], [0])),
                           "n_jobs": n_jobs_bad()}))
        methods = (("reduce_error", "residual_correlation") if kind == "values" else
                   ("reduce_error", "complementarity", "margin_distance", "orientation"))
        order_bad = {"members": mb, "y": yb, "counts": COUNTS_BAD,
                     "method": option(*methods, "orientation", "residual_correlation", "ij"),
                     "folds": option(None, 2, 3, 1, 0, R + 1, 2**62),
                     "orders": option(1, 2, 10**12),
                     "target_margin": floats_option(0.075, 1.0, 0.0, 2.0),
                     "rng": option(1, 2**64 - 1, 2**64, np.random.default_rng(0)),
                     "n_jobs": n_jobs_bad()}
        calls.append(Call(f"order_members[{kind}]", _fn(bagwise.order_members, "members", "y"),
                          _copy(members=train, y=y_train, method=None, counts=COUNTS,
                                folds=2, orders=3, target_margin=0.075, rng=0, n_jobs=None),
                          order_bad))
        if kind != "labels":
            calls.append(Call(
                f"prediction_interval[{kind}]",
                _fn(bagwise.prediction_interval, "members", "counts", "train_members", "y_train"),
                _copy(members=members, counts=COUNTS, train_members=train, y_train=y_train,
                      level=0.8, method=None, n_jobs=None),
                {"members": mb, "counts": COUNTS_BAD, "train_members": mb, "y_train": yb,
                 "level": floats_option(0.5, 0.9, 0.99, 0.999), "n_jobs": n_jobs_bad(),
                 "method": option("jackknife+", "out_of_bag_residual", "least_ambiguous",
                                  "adaptive", "ij")}))
            calls.append(Call(
                f"diagnose[{kind}]",
                _fn(bagwise.diagnose, "members", "y"),
                _copy(members=members, y=y, counts=COUNTS, reference=None, train_members=train,
                      y_train=y_train, rng=0, n_jobs=None),
                {"members": mb, "y": yb, "counts": COUNTS_BAD, "train_members": mb,
                 "y_train": yb, "reference": st.one_of(array_bad("float", 1), option(Y)),
                 "rng": option(1, 2**64), "n_jobs": n_jobs_bad()}, weight=0.5))
    calls.append(Call("correlation", _fn(bagwise.correlation, "members", "y"),
                      _copy(members=VALUES, y=Y, matrix=False, n_jobs=None),
                      {"members": members_bad("values"), "y": targets_bad("values"),
                       "matrix": option(), "n_jobs": n_jobs_bad()}))
    calls.append(Call("replicate_spread", _fn(bagwise.replicate_spread, "members"),
                      _copy(members=REPLICATES, y=Y, n_jobs=None),
                      {"members": array_bad("float", 3), "y": targets_bad("values"),
                       "n_jobs": n_jobs_bad()}))
    calls.append(Call("resample", _fn(bagwise.resample, "n_rows", "n_members"),
                      _copy(n_rows=R, n_members=M, scheme="bootstrap", fraction=1.0, strata=None,
                            groups=None, block_length=None, group_size=None, rng=0, n_jobs=None),
                      {"n_rows": option(1, 2, 2**62), "n_members": option(1, 2, 2**62),
                       "scheme": option("bootstrap", "subsample", "bayesian", "little_bags"),
                       "fraction": floats_option(0.0, 0.3, 0.5, 2.0, 1e300),
                       "strata": st.one_of(array_bad("int", 1), option(np.arange(R) % 2)),
                       "groups": st.one_of(array_bad("int", 1), option(np.arange(R) // 5)),
                       "block_length": option(1, 2, R, R + 1), "group_size": option(2, 4, 3),
                       "rng": option(1, 2**64), "n_jobs": n_jobs_bad()}, also=("progress",)))
    scheme = option("bootstrap", "subsample", "bayesian", "little_bags", "jackknife")
    calls.append(Call("count_gram", _fn(bagwise.count_gram, "counts"),
                      _copy(counts=COUNTS, scheme=None, jackknife=False, n_jobs=None),
                      {"counts": COUNTS_BAD, "scheme": scheme, "jackknife": option(),
                       "n_jobs": n_jobs_bad()}))
    calls.append(Call("prediction_variance", _fn(bagwise.prediction_variance, "members", "counts"),
                      _copy(members=VALUES, counts=COUNTS, method="ij", corrected=True,
                            scheme=None, group_size=None, n_jobs=None),
                      {"members": members_bad("values"), "counts": COUNTS_BAD,
                       "method": option("ij", "jackknife", "little_bags", "jab"),
                       "corrected": option(), "scheme": scheme, "group_size": option(2, 4),
                       "n_jobs": n_jobs_bad()}))
    calls.append(Call("spread", _fn(bagwise.spread, "members", "counts"),
                      _copy(members=VALUES, counts=COUNTS, scheme=None, n_jobs=None),
                      {"members": members_bad("values"), "counts": COUNTS_BAD, "scheme": scheme,
                       "n_jobs": n_jobs_bad()}))
    return calls


# -- streams --------------------------------------------------------------------------------

def _stream_run(factory, update_names):
    """Build two streams, update each with half the points (``chunk`` and the second half),
    merge, pickle round trip, result."""
    def run(args):
        options = {k[4:]: v for k, v in args.items() if k.startswith("opt_")}
        first = factory(**options)
        first.update(*(args[n] for n in update_names))
        second = args["other"]
        if second == "fresh":
            second = factory(**options)
            second.update(*(args["rest_" + n] for n in update_names))
        first.merge(second)
        first = pickle.loads(pickle.dumps(first))
        return first.result()
    return run


def _halves(**arrays):
    """(first-half arguments, second-half arguments) split along the points (last axis of
    ``members``/``counts``, first of the targets)."""
    first, rest = {}, {}
    for name, (array, axis) in arrays.items():
        n = array.shape[axis] // 2
        first[name] = np.take(array, np.arange(n), axis=axis)
        rest["rest_" + name] = np.take(array, np.arange(n, array.shape[axis]), axis=axis)
    return first, rest


def _wrong_streams():
    return option("fresh", bagwise.decompose_stream(), bagwise.size_curve_stream(),
                  bagwise.count_gram_stream(), bagwise.out_of_bag_stream(),
                  bagwise.correlation_stream(), bagwise.diversity_stream(n_classes=3),
                  bagwise.replicate_spread_stream())


def stream_calls() -> list[Call]:
    specs = [
        ("decompose_stream", bagwise.decompose_stream, ("members", "y"),
         dict(members=(VALUES, 1), y=(Y, 0)), dict(loss=None, member_weights=None, n_jobs=None),
         {"loss": option(*LOSSES), "member_weights": WEIGHTS_BAD, "n_jobs": n_jobs_bad()}),
        ("size_curve_stream", bagwise.size_curve_stream, ("members", "y"),
         dict(members=(LABELS, 1), y=(Y_LABELS, 0)),
         dict(loss=None, sizes=None, orders=3, rng=0, n_jobs=None),
         {"loss": option(*LOSSES), "sizes": option([1, 2], [M + 1], [0]),
          "orders": option(1, 2), "rng": option(1, 2**64), "n_jobs": n_jobs_bad()}),
        ("correlation_stream", bagwise.correlation_stream, ("members", "y"),
         dict(members=(VALUES, 1), y=(Y, 0)), dict(matrix=False, n_jobs=None),
         {"matrix": option(), "n_jobs": n_jobs_bad()}),
        ("diversity_stream", bagwise.diversity_stream, ("members", "y"),
         dict(members=(PROBS, 1), y=(Y_LABELS, 0)), dict(n_classes=C, n_jobs=None),
         {"n_classes": option(2, 4, 2**21), "n_jobs": n_jobs_bad()}),
        ("out_of_bag_stream", bagwise.out_of_bag_stream, ("members", "counts", "y"),
         dict(members=(TRAIN, 1), counts=(COUNTS, 1), y=(Y_TRAIN, 0)),
         dict(loss=None, n_jobs=None, sizes=None),
         {"loss": option(*LOSSES), "sizes": option([1, 2], [M + 1]), "n_jobs": n_jobs_bad()}),
        ("replicate_spread_stream", bagwise.replicate_spread_stream, ("members", "y"),
         dict(members=(REPLICATES, 2), y=(Y, 0)), dict(n_jobs=None), {"n_jobs": n_jobs_bad()}),
        ("count_gram_stream", bagwise.count_gram_stream, ("counts",),
         dict(counts=(COUNTS, 1)), dict(scheme=None, jackknife=False, n_jobs=None),
         {"scheme": option("bootstrap", "subsample", "jackknife"), "jackknife": option(),
          "n_jobs": n_jobs_bad()}),
    ]
    calls = []
    for name, factory, update_names, arrays, options, option_bad in specs:
        first, rest = _halves(**arrays)
        base = {**first, **rest, **{"opt_" + k: v for k, v in options.items()}, "other": "fresh"}
        bad = {"opt_" + k: v for k, v in option_bad.items()}
        bad["other"] = _wrong_streams()
        for arg, (array, _axis) in arrays.items():
            if arg == "counts":
                bad[arg] = COUNTS_BAD
            elif arg == "members":
                bad[arg] = array_bad("float" if array.dtype.kind == "f" else "int", array.ndim)
            else:
                bad[arg] = array_bad("float" if array.dtype.kind == "f" else "int", 1)
        calls.append(Call(name, _stream_run(factory, update_names), _copy(**base), bad,
                          also=tuple(k[4:] for k in base if k.startswith("opt_"))
                          + ("other", "chunk", "self")))
    return calls


# -- estimators, persistence, read_ensemble, compare_learners --------------------------------

_FITTED: dict[str, Any] = {}


def fitted(name: str):
    """A small fitted estimator (cached; the calls on it do not change it)."""
    if name not in _FITTED:
        from bagwise import BagClassifier, BagRegressor

        if name == "regressor":
            _FITTED[name] = BagRegressor(n_members=6, max_depth=3, random_state=0,
                                         n_jobs=1).fit(X, Y_X)
        elif name == "classifier":
            _FITTED[name] = BagClassifier(n_members=6, max_depth=3, random_state=0,
                                          n_jobs=1).fit(X, Y_X_LABELS)
        else:
            from sklearn.ensemble import BaggingRegressor
            from sklearn.tree import DecisionTreeRegressor

            _FITTED[name] = BaggingRegressor(DecisionTreeRegressor(max_depth=3), n_estimators=5,
                                             random_state=0).fit(X, Y_X)
    return _FITTED[name]


X_BAD = array_bad("float", 2, [Bad("one feature", lambda a: np.asarray(a)[:, :1])])


def _fit(cls_name):
    def run(args):
        import bagwise as bw

        args = dict(args)
        X_, y_ = args.pop("X"), args.pop("y")
        return getattr(bw, cls_name)(**args).fit(X_, y_)
    return run


def _method(which, method, *positional):
    def run(args):
        args = dict(args)
        first = [args.pop(p) for p in positional]
        return getattr(fitted(which), method)(*first, **args)
    return run


def _pruned(args):
    """A pruned regressor's member predictions at new rows (the bag itself holds no numbers
    the contract reads)."""
    return fitted("regressor").prune(**args).member_predictions(X_NEW)


def _nan_in_bag(result) -> None:
    """Out-of-bag predictions: NaN exactly where the member drew the row, finite elsewhere."""
    in_bag = fitted("regressor").in_bag_ > 0
    if result.shape != in_bag.shape or not np.array_equal(np.isnan(result), in_bag) or not (
            np.all(np.isfinite(result[~in_bag]))):
        raise Crash("out-of-bag predictions are not NaN exactly at the in-bag entries")


@contextlib.contextmanager
def _in_folder(folder):
    """Run in ``folder`` (a generated relative path writes there, not into the repository)."""
    here = os.getcwd()
    os.chdir(folder)
    try:
        yield
    finally:
        os.chdir(here)


def _save_load(args):
    with tempfile.TemporaryDirectory() as folder, _in_folder(folder):
        path = args["path"]
        if isinstance(path, str) and path == "file":
            path = os.path.join(folder, "model.bag")
        bagwise.save(args["estimator"], path)
        loaded = bagwise.load(path)
        return loaded.member_predictions(X_NEW)


def _corrupt(make_bytes):
    def run(args):
        with tempfile.TemporaryDirectory() as folder:
            path = os.path.join(folder, "model.bag")
            bagwise.save(fitted("regressor"), path)
            with open(path, "rb") as handle:
                data = handle.read()
            target = args["path"]
            if target == "file":
                with open(path, "wb") as handle:
                    handle.write(make_bytes(data))
                target = path
            elif target == "folder":
                target = folder
            elif target == "missing":
                target = os.path.join(folder, "missing.bag")
            return bagwise.load(target).member_predictions(X_NEW)
    return run


def _load_run(args):
    return _corrupt(args["bytes"])({"path": args["path"]})


def _bytes_bad() -> st.SearchStrategy:
    def flip(i, v):
        def make(data):
            data = bytearray(data)
            data[i % len(data)] = v
            return bytes(data)
        return Bad(f"byte {i} = {v}", make)

    def cut(i):
        return Bad(f"cut at {i}", lambda data: data[: i % max(len(data), 1)])

    return st.one_of(st.builds(flip, st.integers(0, 10**6), st.integers(0, 255)),
                     st.builds(cut, st.integers(0, 10**6)),
                     st.sampled_from([Bad("empty", lambda d: b""),
                                      Bad("random bytes", lambda d: os.urandom(64)),
                                      Bad("npy", lambda d: _npy_bytes())])).map(
        lambda bad: Bad(bad.label, lambda _start, bad=bad: bad.make))


def _npy_bytes() -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, np.zeros(3))
    return buffer.getvalue()


def _read_ensemble(args):
    args = dict(args)
    model = args.pop("model")
    if isinstance(model, str) and model in ("regressor", "classifier", "sklearn"):
        model = fitted(model)
    return bagwise.read_ensemble(model, args.pop("X"), **args)


def _compare(args):
    args = dict(args)
    return bagwise.compare_learners(args.pop("X"), args.pop("y"), args.pop("learners"), **args)


def estimator_calls() -> list[Call]:
    fit_options = {"n_members": option(1, 2, 2**62), "n_jobs": n_jobs_bad(),
                   "max_depth": option(1, 2**40), "min_leaf": option(1, 30, 31),
                   "fraction": floats_option(0.1, 2.0), "learner": option("tree", "linear",
                                                                          "neighbors", "forest"),
                   "scheme": option("bootstrap", "subsample", "bayesian", "little_bags"),
                   "split_features": option(1, 3, 4, "sqrt"), "random_state": option(1, 2**64),
                   "splitter": option("auto", "exact", "histogram"), "neighbors": option(1, 30, 31),
                   "penalty": floats_option(0.0, 1.0)}
    base = dict(X=X, y=Y_X, n_members=4, max_depth=3, random_state=0, n_jobs=1)
    import inspect

    from bagwise import BagClassifier

    parameters = tuple(inspect.signature(BagClassifier).parameters)
    calls = [
        Call("BagRegressor.fit", _fit("BagRegressor"), _copy(**base),
             {"X": X_BAD, "y": targets_bad("values"), **fit_options}, also=parameters,
             weight=0.5),
        Call("BagClassifier.fit", _fit("BagClassifier"), _copy(**{**base, "y": Y_X_LABELS}),
             {"X": X_BAD, "y": st.one_of(targets_bad("values"), targets_bad("labels")),
              **fit_options}, also=parameters, weight=0.5),
    ]
    for which, cls, methods in [
        ("regressor", "BagRegressor", ["predict", "member_predictions", "prediction_variance",
                                       "spread", "prediction_interval"]),
        ("classifier", "BagClassifier", ["predict", "predict_proba", "member_predictions"]),
    ]:
        for method in methods:
            calls.append(Call(f"{cls}.{method}", _method(which, method, "X"), _copy(X=X_NEW),
                              {"X": X_BAD}))
        y_new = Y_X[:7] if which == "regressor" else Y_X_LABELS[:7]
        calls.append(Call(f"{cls}.diagnose", _method(which, "diagnose", "X", "y"),
                          _copy(X=X_NEW, y=y_new, reference=None),
                          {"X": X_BAD, "y": targets_bad("values" if which == "regressor"
                                                        else "labels"),
                           "reference": st.one_of(array_bad("float", 1), option())},
                          weight=0.5))
        calls.append(Call(f"{cls}.out_of_bag", _method(which, "out_of_bag"),
                          _copy(loss=None), {"loss": option(*LOSSES)}))
    calls.append(Call("BagRegressor.prune", _pruned, _copy(n_members=2, tolerance=0.01,
                                                          method=None, X=None, y=None),
                      {"n_members": option(1, 4, 0.5, "smallest", 0, 5, 1.5, "all", None),
                       "tolerance": floats_option(0.01, 0.5, 0.0, 1.0),
                       "method": option("reduce_error", "residual_correlation", "orientation"),
                       "X": st.one_of(X_BAD, option(X_NEW)),
                       "y": st.one_of(targets_bad("values"), option(Y_X[:7]))}))
    calls.append(Call("BagClassifier.order_members", _method("classifier", "order_members"),
                      _copy(X=None, y=None, method=None, out_of_bag=None, folds=2, orders=3),
                      {"X": st.one_of(X_BAD, option(X_NEW)),
                       "y": st.one_of(targets_bad("labels"), option(Y_X_LABELS[:7])),
                       "method": option("reduce_error", "margin_distance", "orientation",
                                        "residual_correlation"),
                       "out_of_bag": option(True, False, None), "folds": option(None, 2, 1, 0),
                       "orders": option(1, 10**12)}))
    calls.append(Call("BagRegressor.out_of_bag_predictions",
                      _method("regressor", "out_of_bag_predictions"), _copy(X=None),
                      {"X": X_BAD}, check=_nan_in_bag))
    calls.append(Call("save/load", _save_load,
                      lambda: {"estimator": fitted("regressor"), "path": "file"},
                      {"estimator": option(fitted("classifier"), "regressor"),
                       "path": option("/", "/nonexistent/folder/model.bag")},
                      documented=(OSError,)))
    calls.append(Call("load[corrupt]", _load_run, lambda: {"bytes": bytes, "path": "file"},
                      {"bytes": _bytes_bad(), "path": option("file", "folder", "missing")},
                      documented=(OSError,)))
    calls.append(Call("read_ensemble", _read_ensemble,
                      _copy(model="sklearn", X=X_NEW, X_train=X, y_train=Y_X),
                      {"model": option("regressor", "classifier", "sklearn"), "X": X_BAD,
                       "X_train": X_BAD, "y_train": targets_bad("values")}))
    calls.append(Call("compare_learners", _compare,
                      _copy(X=X, y=Y_X, learners=["tree", "linear"], n_members=4, folds=2,
                            level=0.95, loss=None, task=None, random_state=0, n_jobs=1),
                      {"X": X_BAD, "y": targets_bad("values"),
                       "learners": option(["tree"], {"a": "tree"}, ["nonsense"], [("tree", 3)]),
                       "n_members": option(2, 2**62), "folds": option(2, 3, 31, 1),
                       "level": floats_option(0.5, 0.99), "loss": option(*LOSSES),
                       "task": option("regression", "classification"),
                       "n_jobs": n_jobs_bad()}, weight=0.3))
    return calls


# -- the command line -----------------------------------------------------------------------

def _cli(args):
    """``python -m bagwise report`` in process: exit status 0, or 2 with one ``error:`` line
    naming an option; a raised exception is a crash."""
    from bagwise.__main__ import main

    with tempfile.TemporaryDirectory() as folder:
        argv = ["report", "--out", os.path.join(folder, "r.html"), "--quiet"]
        for option_name in ("members", "targets", "counts"):
            value = args[option_name]
            path = os.path.join(folder, option_name + ".npy")
            if isinstance(value, Bad):
                with open(path, "wb") as handle:
                    handle.write(value.make(_npy_bytes()))
            elif isinstance(value, str) and value == "missing":
                path = os.path.join(folder, "nothing.npy")
            elif isinstance(value, str) and value == "folder":
                path = folder
            else:
                try:
                    np.save(path, np.asarray(value), allow_pickle=True)
                except (ValueError, TypeError):
                    return "refused"
            argv += [f"--{option_name}", path]
        err = io.StringIO()
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
            try:
                status = main(argv)
            except SystemExit as exit_:
                status = exit_.code
        lines = err.getvalue().strip().splitlines()
        if status == 0:
            return "accepted"
        errors = [line for line in lines if line.startswith("error:")]
        if status != 2 or len(errors) != 1 or not re.match(r"error: (--[a-z-]+|argument --)",
                                                           errors[0]):
            raise Crash(f"exit status {status}, stderr {err.getvalue()!r}")
        return "refused"


def cli_calls() -> list[Call]:
    files = st.sampled_from([Bad("missing", lambda a: "missing"),
                             Bad("folder", lambda a: "folder"),
                             Bad("random bytes", lambda a: Bad("r", lambda d: os.urandom(40))),
                             Bad("truncated npy", lambda a: Bad("t", lambda d: d[:30])),
                             Bad("empty file", lambda a: Bad("e", lambda d: b"")),
                             Bad("object array", lambda a: np.array([{"a": 1}], dtype=object))])
    return [Call("cli report", _cli_outcome, _copy(members=TRAIN, targets=Y_TRAIN, counts=COUNTS),
                 {"members": st.one_of(files, members_bad("values")),
                  "targets": st.one_of(files, targets_bad("values")),
                  "counts": st.one_of(files, COUNTS_BAD)}, weight=0.3)]


def _cli_outcome(args):
    """The CLI's own verdict as an outcome: a refusal (exit 2) is a documented refusal."""
    if _cli(args) == "refused":
        raise ValueError("`members`: the command line refused the files (exit status 2)")
    return None


def all_calls() -> list[Call]:
    return function_calls() + stream_calls() + estimator_calls() + cli_calls()
