"""The one reader of a ``members`` array and its targets, shared by every family.

Member predictions come in three kinds, told apart by dtype and shape:

- values: float32/float64 ``(n_members, n_points)`` (regression), loss ``"squared_error"``;
- probabilities: float32/float64 ``(n_members, n_points, n_classes)``, loss
  ``"brier_score"``;
- labels: integer ``(n_members, n_points)`` class indices ``0..n_classes-1``, loss
  ``"error_rate"``.

Float inputs are returned as they are (no upcasting copy, any strides); integer labels as
int64 (other integer dtypes are converted once). Every message names the argument in
backticks. The limits mirror the core's (``src/members.rs``).
"""

from __future__ import annotations

import numpy as np

from ._validation import positive_int

__all__ = [
    "KINDS",
    "LOSS_OF_KIND",
    "MAX_CLASSES",
    "PROBABILITY_TOLERANCE",
    "WEIGHT_TOLERANCE",
    "loss_for",
    "loss_option",
    "member_weights",
    "members_array",
    "n_classes_of",
    "targets",
]

KINDS = ("values", "probabilities", "labels")
LOSS_OF_KIND = {"values": "squared_error", "probabilities": "brier_score", "labels": "error_rate"}
_KIND_OF_LOSS = {loss: kind for kind, loss in LOSS_OF_KIND.items()}
_LOSSES = "'squared_error', 'brier_score' or 'error_rate'"

#: Largest number of classes (the core's ``members::MAX_CLASSES``).
MAX_CLASSES = 1 << 20
#: Largest |sum_c p_c - 1| of one member's probabilities at a point (the core checks it).
PROBABILITY_TOLERANCE = 1e-5
#: Largest |sum_b w_b - 1| of member weights.
WEIGHT_TOLERANCE = 1e-6


def members_array(members, name: str = "members") -> tuple[str, np.ndarray]:
    """``(kind, array)``: the kind (one of `KINDS`) and the array the core reads.

    Raises ``TypeError`` for a dtype that is neither float32/float64 nor integer,
    ``ValueError`` for a wrong number of dimensions, an empty axis or a negative label.
    """
    array = members if isinstance(members, np.ndarray) else np.asarray(members)
    kind = array.dtype.kind
    if kind == "f":
        if array.dtype not in (np.float32, np.float64):
            raise TypeError(f"`{name}`: float predictions must be float32 or float64, got {array.dtype}")
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
    if 0 in array.shape:
        raise ValueError(f"`{name}`: is empty (shape {array.shape})")
    if found == "labels":
        if array.dtype == np.uint64 and array.max() > np.iinfo(np.int64).max:
            raise ValueError(f"`{name}`: labels are class indices; got {array.max()}")
        array = array.astype(np.int64, copy=False)
        if array.min() < 0:
            raise ValueError(f"`{name}`: labels are class indices 0..n_classes-1; got {array.min()}")
    return found, array


def targets(y, kind: str, n_points: int, name: str = "y") -> np.ndarray:
    """The targets of ``n_points`` points for members of ``kind``: finite float64 values,
    or int64 class indices for probabilities and labels."""
    array = y if isinstance(y, np.ndarray) else np.asarray(y)
    if array.ndim != 1:
        raise ValueError(f"`{name}`: expected a 1-D array, got shape {array.shape}")
    if array.shape[0] != n_points:
        raise ValueError(f"`{name}`: has {array.shape[0]} values but `members` has {n_points} points")
    if kind == "values":
        if array.dtype.kind not in "fiu":
            raise TypeError(f"`{name}`: expected numbers, got dtype {array.dtype}")
        array = array.astype(np.float64, copy=False)
        if not np.all(np.isfinite(array)):
            raise ValueError(f"`{name}`: contains NaN or infinite values")
        return array
    if array.dtype.kind not in "iu":
        raise TypeError(f"`{name}`: class labels must be integers 0..n_classes-1, got dtype "
                        f"{array.dtype}")
    array = array.astype(np.int64, copy=False)
    if array.size and array.min() < 0:
        raise ValueError(f"`{name}`: labels are class indices 0..n_classes-1; got {array.min()}")
    return array


def n_classes_of(n_classes, labels: np.ndarray, y: np.ndarray | None = None,
                 name: str = "n_classes") -> int:
    """The class count of int64 ``labels`` (and targets ``y``): ``n_classes`` if given
    (checked against the largest label), else the largest label + 1; at most `MAX_CLASSES`."""
    top = int(labels.max())
    if y is not None and y.size:
        top = max(top, int(y.max()))
    n_classes = top + 1 if n_classes is None else positive_int(n_classes, name)
    if n_classes > MAX_CLASSES:
        raise ValueError(f"`{name}`: {n_classes} classes exceed the {MAX_CLASSES} supported; "
                         "labels must be class indices 0..n_classes-1")
    if top >= n_classes:
        raise ValueError(f"`{name}`: is {n_classes} but a label {top} occurs")
    return n_classes


def member_weights(weights, n_members: int, name: str = "member_weights") -> np.ndarray | None:
    """``None`` (equal weights) or float64 weights, one per member, finite, non-negative and
    summing to 1 within `WEIGHT_TOLERANCE`."""
    if weights is None:
        return None
    array = np.asarray(weights)
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
