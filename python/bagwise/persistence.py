"""Save fitted native ensembles to a file of our own and load them back, executing no code.

The container (written and verified in Rust, see ``src/persistence.rs``) holds the magic
bytes ``\\x89BAGWISE``, a format version, the learner kind, a JSON metadata section (the
estimator's parameters, ``classes_``, ``feature_names_in_``, ``n_features_in_``, the in-bag
counts), the learner's binary state and a CRC-32 of everything before it. Loading parses
JSON and plain binary data only, unlike unpickling.
"""

from __future__ import annotations

import base64
import json
import math
import numbers
import os
import zlib

import numpy as np

from . import _core, _learners

__all__ = ["load", "save"]

_FORMAT = "bagwise-ensemble"
_CLASS_KINDS = "biufUO"
# Parameters as files written before the estimators' glossary names spelled them.
_FORMER_PARAMETERS = {"members": "n_members", "seed": "random_state"}


def _array_to_json(array: np.ndarray) -> dict:
    # zlib keeps in-bag counts (about 1.9 bits of entropy each) far below their raw bytes,
    # which would otherwise outweigh a small model's trees.
    array = np.ascontiguousarray(array)
    little = array.astype(array.dtype.newbyteorder("<"), copy=False)
    return {"dtype": little.dtype.str, "shape": list(array.shape),
            "zlib": base64.b64encode(zlib.compress(little.data)).decode("ascii")}


def _array_from_json(entry: dict) -> np.ndarray:
    dtype = np.dtype(entry["dtype"])
    if dtype.kind not in "uf":
        raise ValueError(f"unexpected dtype {dtype}")
    shape = entry["shape"]
    if not isinstance(shape, list) or not all(
            isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape):
        raise ValueError("the array shape is not a list of sizes")
    size = dtype.itemsize * math.prod(shape)
    if "zlib" in entry:
        # Inflated by at most the bytes the shape needs, so a crafted stream cannot expand
        # past them.
        stream = zlib.decompressobj()
        try:
            raw = stream.decompress(base64.b64decode(entry["zlib"], validate=True),
                                  max(size, 1))  # 0 would mean no limit
        except zlib.error as err:
            raise ValueError(f"the compressed array is corrupt ({err})") from None
        if len(raw) != size or not stream.eof or stream.unconsumed_tail:
            raise ValueError("the compressed array does not hold its shape's values")
    else:  # files written before the counts were compressed
        raw = base64.b64decode(entry["data"], validate=True)
    return np.frombuffer(raw, dtype=dtype).reshape(shape).astype(dtype.newbyteorder("="))


def _classes_to_json(classes: np.ndarray) -> dict:
    kind = classes.dtype.kind
    if kind not in _CLASS_KINDS or (kind == "O" and not all(isinstance(c, str) for c in classes)):
        raise TypeError(
            f"`classes_`: labels of dtype {classes.dtype} cannot be saved; use numbers or strings"
        )
    return {"dtype": "object" if kind == "O" else classes.dtype.str, "values": classes.tolist()}


def save(estimator, path) -> None:
    """Write a fitted native `BagRegressor` / `BagClassifier` to ``path``.

    Parameters
    ----------
    estimator : BagRegressor or BagClassifier
        Fitted with a native learner (``"linear"``, ``"neighbors"``, ``"tree"``).
    path : str or os.PathLike
        The file to write (overwritten).

    Raises
    ------
    TypeError
        For an ensemble of wrapped estimators: those can only be pickled (and a pickle
        must never be loaded from an untrusted source, since unpickling can run code).
    OSError
        When ``path`` cannot be written; the message starts with `path`.

    Notes
    -----
    The training rows are not stored, so after `load` call
    ``out_of_bag_predictions(X_train)`` with them.

    Examples
    --------
    >>> import numpy as np, bagwise, tempfile, os
    >>> rng = np.random.default_rng(0)
    >>> X, y = rng.normal(size=(50, 2)), rng.normal(size=50)
    >>> bag = bagwise.BagRegressor("linear", n_members=5).fit(X, y)
    >>> path = os.path.join(tempfile.mkdtemp(), "bag.bagwise")
    >>> bagwise.save(bag, path)
    >>> back = bagwise.load(path)
    >>> bool(np.array_equal(back.predict(X), bag.predict(X)))
    True
    """
    from sklearn.utils.validation import check_is_fitted

    if not isinstance(estimator, _learners.estimator_classes()):
        raise TypeError(f"`estimator`: expected a BagRegressor or BagClassifier, got "
                        f"{type(estimator).__name__}")
    check_is_fitted(estimator)
    if "_model" not in estimator.__dict__:
        raise TypeError(
            "`estimator`: an ensemble of wrapped estimators cannot be saved in the bagwise "
            "format (its members are arbitrary Python objects); pickle it instead, and never "
            "unpickle data from an untrusted source"
        )
    model = estimator._model
    params = estimator.get_params(deep=False)
    if callable(params.get("progress")):
        params["progress"] = False
    params["random_state"] = estimator.seed_
    for key, value in params.items():
        if isinstance(value, (bool, str)) or value is None:
            continue
        if isinstance(value, numbers.Integral):
            params[key] = int(value)
        elif isinstance(value, numbers.Real):
            params[key] = float(value)
    metadata = {
        "format": _FORMAT,
        "estimator": type(estimator).__name__,
        "bagwise_version": _core.__version__,
        "params": params,
        "n_features_in": int(estimator.n_features_in_),
        "feature_names_in": (estimator.feature_names_in_.tolist()
                             if hasattr(estimator, "feature_names_in_") else None),
        "classes": (_classes_to_json(estimator.classes_)
                    if hasattr(estimator, "classes_") else None),
        "in_bag": _array_to_json(estimator.in_bag_),
    }
    if "member_indices_" in estimator.__dict__:  # a pruned bag: its members' first positions
        metadata["member_indices"] = estimator.member_indices_.tolist()
    # The model is encoded straight into the file's bytes: its payload is held once.
    data = _core.pack_model(_learners.learner_of_model(model).tag, json.dumps(metadata), model)
    with _opened(path, "wb") as handle:
        handle.write(data)


def _opened(path, mode: str):
    """``open(path, mode)``, its errors naming `path`: a ``TypeError`` for what is not a
    path, the ``OSError`` (same subclass and errno) for a file that cannot be opened."""
    try:
        name = os.fspath(path)
    except TypeError:
        raise TypeError(f"`path`: expected a str or os.PathLike, got {type(path).__name__}") from None
    try:
        return open(name, mode)  # the caller closes it
    except OSError as err:
        verb = "read" if "r" in mode else "write"
        error = type(err)(f"`path`: cannot {verb} {name!s}: {err.strerror or err}")
        error.errno = err.errno
        raise error from None


def load(path):
    """Read an ensemble written by `save`; executes no code from the file.

    Raises
    ------
    ValueError
        When the file is empty, not a bagwise file, has another format version, fails its
        checksum (corrupted or truncated) or holds inconsistent contents.
    FileNotFoundError, IsADirectoryError, OSError
        When ``path`` does not exist, is a directory or cannot be read.

    Every message starts with the argument name, ``path``, in backticks.
    """
    try:
        name = os.fspath(path)
    except TypeError:
        raise TypeError(f"`path`: expected a str or os.PathLike, got {type(path).__name__}") from None
    where = f"`path`: {name!s}"
    if os.path.isdir(name):
        raise IsADirectoryError(f"{where}: is a directory, not a bagwise file")
    try:
        with open(name, "rb") as handle:
            data = handle.read()
    except FileNotFoundError:
        raise FileNotFoundError(f"{where}: no such file") from None
    except OSError as err:
        raise type(err)(f"{where}: cannot be read ({err.strerror or err})") from None
    if not data:
        raise ValueError(f"{where}: is empty, not a bagwise file")
    try:
        kind, text, payload = _core.unpack_container(data)
    except ValueError as err:
        raise ValueError(f"{where}: {err}") from None
    try:
        meta = json.loads(text)
        if not isinstance(meta, dict) or meta.get("format") != _FORMAT:
            raise ValueError("the metadata is not that of a bagwise ensemble")
        cls = _learners.estimator_class(meta["estimator"])
        learner = _learners.learner_of_tag(kind)
        if not learner.available:
            raise ValueError(f"the file holds a {kind!r} ensemble, which this build does not have")
        model = learner.core().from_bytes(payload)
        params = {_FORMER_PARAMETERS.get(k, k): v for k, v in meta["params"].items()}
        estimator = cls(**params)
        in_bag = _array_from_json(meta["in_bag"])
        classes = meta["classes"]
        if classes is not None:
            classes = np.array(classes["values"], dtype=classes["dtype"])
            if classes.ndim != 1:
                raise ValueError("the classes are not a list of labels")
        n_features = int(meta["n_features_in"])
        seed = params["random_state"]
        indices = meta.get("member_indices")
        if indices is not None:
            indices = np.asarray(indices, dtype=np.int64)
            if indices.shape != (in_bag.shape[0],) or (indices.size and indices.min() < 0):
                raise ValueError("the member indices do not match the members")
        names = meta["feature_names_in"]
        if names is not None:
            names = np.asarray(names, dtype=object)
            if names.shape != (n_features,):
                raise ValueError("the feature names do not match the number of features")
    except ValueError as err:
        raise ValueError(f"{where}: inconsistent contents ({err})") from None
    except (KeyError, TypeError, AttributeError, OverflowError) as err:
        raise ValueError(f"{where}: inconsistent contents (bad metadata: {err!r})") from None
    consistent = (
        in_bag.ndim == 2
        and model.n_members == in_bag.shape[0]
        and model.n_features == n_features
        and (classes is None) == (not cls._classification)
        and (classes is None or model.n_classes == len(classes))
    )
    if not consistent:
        raise ValueError(f"{where}: inconsistent contents (sizes disagree)")
    estimator._model = model
    estimator.in_bag_ = in_bag
    estimator.n_features_in_ = n_features
    estimator.seed_ = seed
    if indices is not None:
        estimator.member_indices_ = indices
    if names is not None:
        estimator.feature_names_in_ = names
    if classes is not None:
        estimator.classes_ = classes
    return estimator
