"""The one reader of a ``members`` array and its targets, shared by every family.

Member predictions come in three kinds, told apart by dtype and shape:

- values: float32/float64 ``(n_members, n_points)`` (regression), loss ``"squared_error"``;
- probabilities: float32/float64 ``(n_members, n_points, n_classes)``, loss
  ``"brier_score"``;
- labels: integer ``(n_members, n_points)`` class indices ``0..n_classes-1``, loss
  ``"error_rate"``.

Float inputs are returned as they are (no upcasting copy, any strides; only a non-native
byte order is converted, once); integer labels as int64 (other integer dtypes are converted
once). A family that takes only some kinds says which (``kinds=``) and gets the same message
for the others. Every message names the argument in backticks, so the same fault reads the
same in every family. NaN and infinite predictions, and probabilities that do not sum to 1,
are left to the core, which names the member and point.

The limits are the core's (``src/members.rs``): `PROBABILITY_TOLERANCE` and `MAX_CLASSES`.

In-bag ``counts`` have one reader too, `in_bag_counts`, used by every function that takes
them: it refuses arrays that are not counts (row indices, boolean masks, transposed counts,
floats) with a message saying what the array looks like and how to convert it.
"""

from __future__ import annotations

import numpy as np

from . import _core
from ._validation import positive_int

__all__ = [
    "KINDS",
    "LOSS_OF_KIND",
    "MAX_CLASSES",
    "PROBABILITY_TOLERANCE",
    "WEIGHT_TOLERANCE",
    "CONVERT_INDICES",
    "INDEX_DISPERSION",
    "INDEX_MEAN",
    "LARGEST_VALUE",
    "as_array",
    "check_count_total",
    "in_bag_counts",
    "loss_for",
    "loss_option",
    "member_weights",
    "members_array",
    "n_classes_of",
    "replicate_members",
    "targets",
]

KINDS = ("values", "probabilities", "labels")
LOSS_OF_KIND = {"values": "squared_error", "probabilities": "brier_score", "labels": "error_rate"}
_KIND_OF_LOSS = {loss: kind for kind, loss in LOSS_OF_KIND.items()}
_LOSSES = "'squared_error', 'brier_score' or 'error_rate'"

#: Largest number of classes of any members array (the core's ``members::MAX_CLASSES``,
#: 2**20). A family may refuse fewer through ``n_classes_of(max_classes=...)``.
MAX_CLASSES = 1 << 20
#: Largest |sum_c p_c - 1| of one member's probabilities at a point, and the slack below 0
#: and above 1 of one probability: the core's ``members::PROBABILITY_TOLERANCE``, 1e-5 (a
#: float32 softmax over a few hundred classes sums to 1 only within a few 1e-6). The core
#: checks it; it is the one tolerance every family documents.
PROBABILITY_TOLERANCE = 1e-5
#: Largest magnitude of a target value: the square root of the largest float64 (about
#: 1.34e154), above which a squared error overflows to infinity.
LARGEST_VALUE = float(np.sqrt(np.finfo(np.float64).max))
#: Largest |sum_b w_b - 1| of member weights.
WEIGHT_TOLERANCE = 1e-6


_DESCRIBED = {
    "values": "float values (n_members, n_points)",
    "probabilities": "float probabilities (n_members, n_points, n_classes)",
    "labels": "integer labels (n_members, n_points)",
}


def as_array(value, name: str) -> np.ndarray:
    """``value`` as an ndarray without copying numpy inputs (memory maps stay mapped); only a
    non-native byte order (e.g. big-endian data from a file) is converted, once."""
    if not isinstance(value, np.ndarray):
        try:
            value = np.asarray(value)
        except (TypeError, ValueError) as err:
            raise TypeError(f"`{name}`: expected an array, got {type(value).__name__} "
                            f"({err})") from None
    if not value.dtype.isnative:
        value = value.astype(value.dtype.newbyteorder("="))
    return value


def _float_dtype(array: np.ndarray, name: str) -> None:
    if array.dtype not in (np.float32, np.float64):
        raise TypeError(f"`{name}`: float predictions must be float32 or float64, got "
                        f"{array.dtype}")


def members_array(members, name: str = "members", *, kinds: tuple[str, ...] = KINDS,
                  numbers_as_values: bool = False, min_members: int = 1,
                  purpose: str = "this function",
                  check_labels: bool = True) -> tuple[str, np.ndarray]:
    """``(kind, array)``: the kind (one of `KINDS`) and the array the core reads.

    ``kinds`` are the kinds the caller takes (another kind is a ``TypeError`` saying what
    ``purpose`` needs); ``numbers_as_values`` reads integer and boolean arrays as values
    (one float64 copy) instead of labels, for families that take values only;
    ``min_members`` is the fewest members ``purpose`` needs; ``check_labels=False`` returns
    labels in their own integer dtype unchecked, for a core that checks their range itself
    (each check is a pass over the labels).

    Raises ``TypeError`` for a dtype that is neither float32/float64 nor integer or a kind
    outside ``kinds``, ``ValueError`` for a wrong number of dimensions, an empty axis, too
    few members or a negative label.
    """
    array = as_array(members, name)
    kind = array.dtype.kind
    if numbers_as_values and kind in "iub":
        array = array.astype(np.float64)
        kind = "f"
    if kind == "f":
        _float_dtype(array, name)
        if array.ndim == 2:
            found = "values"
        elif array.ndim == 3:
            found = "probabilities"
        else:
            raise ValueError(
                f"`{name}`: expected (n_members, n_points) values or (n_members, n_points, "
                f"n_classes) probabilities, got shape {array.shape}"
            )
    elif kind in "iu":
        if array.ndim != 2:
            raise ValueError(f"`{name}`: integer labels must have shape (n_members, n_points), "
                             f"got {array.shape}")
        found = "labels"
    else:
        raise TypeError(f"`{name}`: expected float predictions or integer labels, got dtype "
                        f"{array.dtype}")
    if found not in kinds:
        wanted = ("class predictions" if set(kinds) == {"labels", "probabilities"}
                  else " or ".join(kinds))
        raise TypeError(f"`{name}`: {purpose} need {wanted} - "
                        f"{' or '.join(_DESCRIBED[k] for k in kinds)} - got "
                        f"{_DESCRIBED[found].split(' (')[0]} of shape {array.shape}")
    if 0 in array.shape:
        raise ValueError(f"`{name}`: is empty (shape {array.shape})")
    if array.shape[0] < min_members:
        raise ValueError(f"`{name}`: needs at least {min_members} members, got "
                         f"{array.shape[0]}")
    if found == "labels" and check_labels:
        if array.dtype == np.uint64 and array.max() > np.iinfo(np.int64).max:
            raise ValueError(f"`{name}`: labels are class indices; got {array.max()}")
        array = array.astype(np.int64, copy=False)
        if array.min() < 0:
            raise ValueError(f"`{name}`: class labels must be non-negative class indices "
                             f"0..n_classes-1; got {array.min()}")
    return found, array


def replicate_members(members, name: str = "members") -> np.ndarray:
    """Float32/float64 values of ensembles refitted on independent training sets, shape
    ``(n_replicates, n_members, n_points)`` with at least 2 replicates, read like
    `members_array` reads values."""
    array = as_array(members, name)
    _float_dtype(array, name)
    if array.ndim != 3:
        raise ValueError(f"`{name}`: expected shape (n_replicates, n_members, n_points), got "
                         f"{array.ndim} dimensions {array.shape}")
    if array.size == 0:
        raise ValueError(f"`{name}`: is empty (shape {array.shape})")
    if array.shape[0] < 2:
        raise ValueError(f"`{name}`: needs at least 2 replicates (ensembles fitted on "
                         "independent training sets) to estimate the between-replicate "
                         f"variance, got {array.shape[0]}")
    return array


def targets(y, kind: str, n_points: int, name: str = "y", *,
            float_labels: bool = False) -> np.ndarray:
    """The targets of ``n_points`` points for members of ``kind``: finite float64 values,
    or int64 class indices for probabilities and labels.

    ``float_labels`` also takes class indices stored as whole floats (e.g. 1.0), for
    families that have always taken them; a fraction or NaN is then a ``ValueError``.
    """
    array = as_array(y, name)
    if array.ndim != 1:
        raise ValueError(f"`{name}`: expected a 1-D array, got shape {array.shape}")
    if array.shape[0] != n_points:
        raise ValueError(f"`{name}`: has {array.shape[0]} values but `members` has {n_points} points")
    if kind == "values" or (float_labels and array.dtype.kind == "f"):
        if array.dtype.kind not in "fiu":
            raise TypeError(f"`{name}`: expected numbers, got dtype {array.dtype}")
        array = array.astype(np.float64, copy=False)
        # The largest and smallest value (both NaN if any value is): two reductions and no
        # temporary arrays, where isfinite and abs made two (a tenth of an out-of-bag pass).
        high, low = (float(array.max()), float(array.min())) if array.size else (0.0, 0.0)
        if not (np.isfinite(high) and np.isfinite(low)):
            raise ValueError(f"`{name}`: contains NaN or infinite values")
        if kind == "values":
            largest = max(abs(high), abs(low))
            if largest > LARGEST_VALUE:
                raise ValueError(f"`{name}`: has a value of {largest:.3g} in "
                                 f"magnitude; above {LARGEST_VALUE:.3g} its squared error "
                                 "overflows float64")
            return array
        fraction = array[array != np.round(array)]
        if fraction.size:
            raise ValueError(f"`{name}`: class labels must be integers 0..n_classes-1; got "
                             f"{float(fraction[0])!r}")
        if array.size and array.max() > np.iinfo(np.int64).max:
            raise ValueError(f"`{name}`: labels are class indices; got {float(array.max())!r}")
    elif array.dtype.kind not in "iu":
        raise TypeError(f"`{name}`: class labels must be integers 0..n_classes-1, got dtype "
                        f"{array.dtype}")
    if array.dtype == np.uint64 and array.size and array.max() > np.iinfo(np.int64).max:
        raise ValueError(f"`{name}`: labels are class indices; got {array.max()}")
    array = array.astype(np.int64, copy=False)
    if array.size and array.min() < 0:
        raise ValueError(f"`{name}`: class labels must be non-negative class indices "
                         f"0..n_classes-1; got {array.min()}")
    return array


def n_classes_of(n_classes, labels: np.ndarray | None, y: np.ndarray | None = None,
                 name: str = "n_classes", *, implied: int | None = None,
                 max_classes: int = MAX_CLASSES, blame_labels: bool = False,
                 labels_name: str = "members", y_name: str = "y") -> int:
    """The class count of int64 ``labels`` (``None`` for probabilities) and targets ``y``.

    ``n_classes`` if given, else ``implied`` (the probabilities' last axis), else the largest
    label + 1; at most ``max_classes``. A given count must equal ``implied``. A label at or
    above a given count is reported against ``n_classes``, or with ``blame_labels`` (a count
    fixed before the labels are seen, as in a stream) or when the count was not given
    against the array holding it, as is an inferred count above ``max_classes``.
    """
    tops = []
    if labels is not None:
        tops.append((int(labels.max()), labels_name))
    if y is not None and y.size:
        tops.append((int(y.max()), y_name))
    top, where = max(tops, key=lambda t: t[0]) if tops else (-1, labels_name)
    given = n_classes
    if n_classes is not None:
        n_classes = positive_int(n_classes, name)
        if n_classes > max_classes:
            raise ValueError(f"`{name}`: at most {max_classes} classes are supported, got "
                             f"{n_classes}")
        if implied is not None and implied != n_classes:
            raise ValueError(f"`{name}`: is {n_classes} but `{labels_name}` has {implied} classes")
    elif implied is not None:
        n_classes = implied
    else:
        n_classes = top + 1
        if n_classes > max_classes:  # the count was inferred: the label is what to fix
            raise ValueError(f"`{where}`: at most {max_classes} classes are supported, "
                             f"found label {top}")
    if top >= n_classes:
        # a count the user did not give (the probabilities' width) is not theirs to fix
        if blame_labels or given is None:
            raise ValueError(f"`{where}`: class labels must be class indices 0..{n_classes - 1}; "
                             f"got {top}")
        raise ValueError(f"`{name}`: is {n_classes} but a label {top} occurs")
    return n_classes


def member_weights(weights, n_members: int, name: str = "member_weights") -> np.ndarray | None:
    """``None`` (equal weights) or float64 weights, one per member, finite, non-negative and
    summing to 1 within `WEIGHT_TOLERANCE`."""
    if weights is None:
        return None
    array = as_array(weights, name)
    if array.dtype.kind not in "fiu":
        raise TypeError(f"`{name}`: expected numbers, got dtype {array.dtype}")
    array = array.astype(np.float64)
    if array.shape != (n_members,):
        raise ValueError(f"`{name}`: expected shape ({n_members},) (one per member), got "
                         f"{array.shape}")
    if not np.all(np.isfinite(array)) or np.any(array < 0):
        raise ValueError(f"`{name}`: must be finite and non-negative")
    if abs(array.sum() - 1.0) > WEIGHT_TOLERANCE:
        raise ValueError(f"`{name}`: must sum to 1 (within {WEIGHT_TOLERANCE:g}), got "
                         f"{array.sum()!r}")
    return array


def loss_option(loss) -> str | None:
    """The ``loss=`` option: ``None`` (the loss that fits the members) or one of the names."""
    if loss is not None and not isinstance(loss, str):
        raise TypeError(f"`loss`: expected {_LOSSES} or None, got {type(loss).__name__}")
    if loss is not None and loss not in _KIND_OF_LOSS:
        raise ValueError(f"`loss`: expected {_LOSSES}, got {loss!r}")
    return loss


def loss_for(loss, kind: str) -> str:
    """The loss for members of ``kind``: ``loss`` checked to fit it, or the one that fits."""
    if loss_option(loss) is None:
        return LOSS_OF_KIND[kind]
    if _KIND_OF_LOSS[loss] != kind:
        raise ValueError(
            f"`loss`: {loss!r} needs {_KIND_OF_LOSS[loss]} but `members` holds {kind} "
            "(values: float (n_members, n_points); probabilities: float (n_members, n_points, "
            "n_classes); labels: integer (n_members, n_points))"
        )
    return loss


#: How drawn row indices convert to in-bag counts (``indices``: one array of row indices per
#: member, e.g. scikit-learn's ``estimators_samples_``).
CONVERT_INDICES = "np.stack([np.bincount(idx, minlength=n_rows) for idx in indices])"
#: `in_bag_counts` reads an array as drawn row indices when its entries average more than
#: `INDEX_MEAN` with a variance above `INDEX_DISPERSION` times that mean. In-bag counts
#: average the draws per training row (a bootstrap's ``fraction``, about 1; at most 1 for a
#: subsample) with a variance close to their mean (a count of one row is about Poisson;
#: common practice); row indices spread evenly over 0..n-1 average (n - 1)/2 with variance
#: (n^2 - 1)/12, (n + 1)/6 times their mean, so index arrays of more than 12 training rows
#: are caught, and counts of more than 4 draws per row pass when they are about as
#: dispersed as a count. The one kind of real counts this refuses: draws of more than 4
#: times the rows made with very unequal row weights (the weights add their own spread).
INDEX_MEAN = 4.0
INDEX_DISPERSION = 2.0


def _counts_object(counts, name: str):
    """``counts`` as an ndarray; a ``Resample`` gives its counts, a list of index arrays
    of different lengths (a ragged ``estimators_samples_``) is refused with the fix."""
    from .resampling import Resample

    if isinstance(counts, Resample):
        if counts.scheme == "bayesian":
            raise TypeError(f"`{name}`: this Resample ({counts.scheme!r}) has continuous row "
                            "weights, not in-bag counts; no row is ever out of bag")
        return counts.counts
    if isinstance(counts, (list, tuple)) and counts and all(
            np.ndim(part) == 1 for part in counts):
        lengths = {len(part) for part in counts}
        if len(lengths) > 1:
            raise TypeError(
                f"`{name}`: got a list of {len(counts)} arrays of different lengths "
                f"({min(lengths)}..{max(lengths)}): drawn row indices per member, not in-bag "
                f"counts (one row per member, one column per training row); convert them "
                f"with {CONVERT_INDICES}")
    return as_array(counts, name)


def _shape_text(shape) -> str:
    return "(" + ", ".join(f"{n:,}" for n in shape) + ")"


def in_bag_counts(counts, name: str = "counts", *, n_members: int | None = None,
                  n_rows: int | None = None, members_from: str = "members",
                  rows_from: str | None = None, min_members: int = 1, min_rows: int = 1,
                  unsigned: bool = False, whole: bool = True,
                  total_from_pass: bool = False) -> np.ndarray:
    """The in-bag counts ``(n_members, n_rows)`` of an ensemble, checked to be counts.

    The one reader of ``counts``: every function that takes them calls it, so the same
    fault reads the same everywhere. Returns the array without a copy (a `Resample` gives
    its ``counts``; a non-native byte order is converted once; with ``unsigned`` a signed
    dtype is reinterpreted as the unsigned one of the same width).

    ``n_members`` / ``n_rows`` are the members and training rows another argument fixes
    (``members_from`` / ``rows_from`` name it in the message); ``whole`` says the counts
    cover every training row (False for a chunk of a stream), which allows the check for
    transposed counts when no other argument fixes the shape. ``total_from_pass`` says the
    caller's own pass reads every count and returns their sum: with ``n_members`` given, the
    drawn-row-indices check below is left to the caller, who passes that sum to
    `check_count_total` after its pass (unsigned counts are then not read here at all).

    Refused, each with a message saying what the array looks like and how to convert it:

    - a boolean dtype (a mask of in-bag or out-of-bag rows, not counts): ``TypeError``;
    - a float dtype (weights, or counts read from a text file): ``TypeError``; any other
      non-integer dtype: ``TypeError``;
    - not 2-D, empty, fewer than ``min_members`` rows or ``min_rows`` columns, a negative
      count: ``ValueError``;
    - a shape that disagrees with ``n_members`` / ``n_rows``, said to be transposed when it
      is ``(n_rows, n_members)``: ``ValueError``;
    - drawn row indices ``(n_members, n_draws)``: entries averaging above `INDEX_MEAN` with
      a variance above `INDEX_DISPERSION` times their mean: ``ValueError``;
    - whole counts without ``n_members``, at least 3 x 3, whose rows sum to different
      totals while every column sums to the number of rows, the fingerprint of bootstrap
      counts ``(n_rows, n_members)`` (each member's column holds its ``n_rows`` draws):
      ``ValueError``.

    Accepted: any non-negative integers not looking like the above, among them bootstrap
    counts of any ``fraction``, stratified, grouped and blocked draws (whose totals differ
    between members), subsample and other 0/1 counts in an integer dtype.
    """
    array = _counts_object(counts, name)
    dtype = array.dtype
    if dtype == np.bool_:
        raise TypeError(
            f"`{name}`: is a boolean mask {_shape_text(array.shape)}, not in-bag counts "
            "(how many times each member drew each training row). An in-bag mask of draws "
            "without replacement converts with `mask.astype(np.int64)` (an out-of-bag mask "
            "with `(~mask).astype(np.int64)`); a bootstrap mask has lost the repeats, so "
            f"rebuild the counts from the drawn row indices with {CONVERT_INDICES}")
    if dtype.kind == "f":
        whole_numbers = bool(array.size) and bool(np.all(np.isfinite(array))) and bool(
            np.all(array == np.round(array)))
        hint = ("its values are whole numbers: convert with `counts.astype(np.int64)`"
                if whole_numbers else
                "its values are not whole numbers, so they are row weights (e.g. a Bayesian "
                "bootstrap's), which have no out-of-bag rows and no counts")
        raise TypeError(f"`{name}`: in-bag counts must be integers, got dtype {dtype}; {hint}")
    if dtype.kind not in "iu":
        raise TypeError(f"`{name}`: expected integer in-bag counts (n_members, n_rows), got "
                        f"dtype {dtype}")
    if array.ndim != 2:
        hint = (f"; one member's counts are `counts[None, :]`, one member's drawn row "
                f"indices convert with {CONVERT_INDICES}" if array.ndim == 1 else "")
        raise ValueError(f"`{name}`: expected shape (n_members, n_rows), one row per member "
                         f"and one column per training row, got {array.shape}{hint}")
    if array.size == 0:
        raise ValueError(f"`{name}`: is empty (shape {array.shape})")
    sums = None
    # With the members fixed by another argument, the total comes from the caller's pass;
    # only signed counts are still read here, for their minimum.
    deferred = total_from_pass and n_members is not None
    if dtype.itemsize <= 2 and not (deferred and dtype.kind == "u"):
        # One parallel pass for the totals and the minimum (numpy's float64 row sums cast
        # every count and take longer than reading the members they come with).
        sums, low = _core.count_row_totals(array)
    elif dtype.kind == "i":
        low = array.min()
    if dtype.kind == "i":
        if low < 0:
            member, row = np.unravel_index(int(np.argmin(array)), array.shape)
            raise ValueError(f"`{name}`: in-bag counts must be non-negative, got {low} "
                             f"(member {member}, row {row})")
    rows, columns = array.shape
    if n_members is not None and rows != n_members:
        if columns == n_members and n_rows in (None, rows):
            raise ValueError(
                f"`{name}`: has shape {_shape_text(array.shape)} but `{members_from}` has "
                f"{n_members:,} members: it looks transposed, one column per member "
                f"(n_rows, n_members); pass `{name}.T` (one row per member)")
        raise ValueError(f"`{name}`: has shape {_shape_text(array.shape)} but `{members_from}` "
                         f"has {n_members:,} members (one row of counts per member)")
    if not deferred:
        if sums is None:
            sums = array.sum(axis=1, dtype=np.float64)
        check_count_total(array, float(sums.sum()), name)
    if n_rows is not None and columns != n_rows:
        where = f"`{rows_from}` has" if rows_from else "expected"
        raise ValueError(f"`{name}`: has shape {_shape_text(array.shape)} but {where} "
                         f"{n_rows:,} training rows (one column of counts per row)")
    # Two members (or two rows) make the fingerprint too likely by chance (e.g. grouped
    # counts [[2, 0, 0], [0, 2, 2]]): it is read from three of each on.
    if whole and n_members is None and rows > 2 and columns > 2 and np.any(sums != sums[0]):
        totals = array.sum(axis=0, dtype=np.float64)
        if np.all(totals == rows):
            raise ValueError(
                f"`{name}`: looks transposed: every column sums to {rows:,} (a member's "
                f"draws from {rows:,} rows) while the rows sum to different totals, as "
                f"bootstrap counts laid out (n_rows, n_members) do; pass `{name}.T` (one row "
                "per member, one column per training row)")
    if rows < min_members:
        raise ValueError(f"`{name}`: needs at least {min_members} members, got {rows}")
    if columns < min_rows:
        raise ValueError(f"`{name}`: needs at least {min_rows} training rows, got {columns}")
    if unsigned and dtype.kind == "i":
        # Same width, reinterpreted: no copy (the counts are non-negative).
        array = array.view(dtype.str.replace("i", "u"))
    return array


def check_count_total(array: np.ndarray, total: float, name: str = "counts") -> None:
    """Raises when in-bag counts ``array`` (n_members, n_rows) whose entries sum to
    ``total`` look like drawn row indices (see `in_bag_counts`)."""
    mean = total / array.size
    if mean > INDEX_MEAN and _variance(array, mean) > INDEX_DISPERSION * mean:
        raise ValueError(
            f"`{name}`: looks like drawn row indices, not in-bag counts: shape "
            f"{_shape_text(array.shape)} with values spanning {array.min()}..{array.max()}, "
            f"each member's row summing to about {total / array.shape[0]:,.0f} where in-bag "
            f"counts sum to the member's draws (about {array.shape[1]:,}, one per training "
            "row). Counts hold how many times each member drew each training row, one "
            f"column per row; convert indices with {CONVERT_INDICES}")


def _variance(array: np.ndarray, mean: float) -> float:
    """Variance of the entries of an integer array, a block of members at a time (no
    float64 copy of the whole array)."""
    total = 0.0
    step = max(1, (1 << 22) // max(1, array.shape[1]))
    for start in range(0, array.shape[0], step):
        block = array[start:start + step].astype(np.float64) - mean
        total += float(np.einsum("ij,ij->", block, block))
    return total / array.size
