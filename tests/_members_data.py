"""Simulated ensembles, straightforward numpy references and bad-input helpers shared by
the tests of the members families (aggregation, decomposition, size curve, correlation)."""

from __future__ import annotations

import numpy as np

# -- simulated ensembles --------------------------------------------------------------------

def regression(members=30, n=2000, seed=0, dtype=np.float64):
    """Bagged-like members: shared signal, member-specific noise, a common bias."""
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    shared = 0.3 * rng.normal(size=n)
    preds = y + shared + 0.2 + 0.7 * rng.normal(size=(members, n))
    return preds.astype(dtype), y


def probabilities(members=25, n=1500, classes=4, seed=1):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    logits = rng.normal(size=(members, n, classes)) + 1.5 * np.eye(classes)[y]
    p = np.exp(logits)
    return p / p.sum(axis=2, keepdims=True), y


def labels(members=21, n=3000, classes=3, seed=2, accuracy=0.6):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, classes, size=n)
    right = rng.random(size=(members, n)) < accuracy
    noise = rng.integers(0, classes, size=(members, n))
    return np.where(right, y, noise).astype(np.int64), y


# -- independent references (straightforward numpy) -----------------------------------------

def numpy_squared(t, y, w=None):
    w = np.full(t.shape[0], 1 / t.shape[0]) if w is None else w
    f = np.tensordot(w, t.astype(np.float64), axes=1)
    ens = (f - y) ** 2
    mem = np.tensordot(w, (t - y) ** 2, axes=1)
    amb = np.tensordot(w, (t - f) ** 2, axes=1)
    return f, ens, mem, amb


def numpy_brier(p, y, w=None):
    w = np.full(p.shape[0], 1 / p.shape[0]) if w is None else w
    onehot = np.eye(p.shape[2])[y]
    soft = np.tensordot(w, p, axes=1)
    ens = ((soft - onehot) ** 2).sum(axis=1)
    mem = np.tensordot(w, ((p - onehot) ** 2).sum(axis=2), axes=1)
    amb = np.tensordot(w, ((p - soft) ** 2).sum(axis=2), axes=1)
    return soft, ens, mem, amb


def numpy_votes(t, n_classes, w=None):
    w = np.ones(t.shape[0]) if w is None else w
    totals = np.zeros((t.shape[1], n_classes))
    for b in range(t.shape[0]):
        np.add.at(totals, (np.arange(t.shape[1]), t[b]), w[b])
    # numpy.argmax returns the first maximal index: the lowest class among ties.
    return totals.argmax(axis=1), totals / w.sum()


def numpy_curve(t, y, orders, sizes, kind):
    """The first-k ensembles of the given orders, scored in plain numpy."""
    out = np.zeros((len(orders), len(sizes)))
    for o, order in enumerate(orders):
        for i, k in enumerate(sizes):
            sub = t[order[:k]]
            if kind == "squared_error":
                out[o, i] = np.mean((sub.mean(axis=0) - y) ** 2)
            elif kind == "brier_score":
                out[o, i] = np.mean(((sub.mean(axis=0) - np.eye(t.shape[2])[y]) ** 2).sum(axis=1))
            else:
                out[o, i] = np.mean(numpy_votes(sub, int(t.max()) + 1)[0] != y)
    return out


def _chunks(n, cuts):
    edges = [0, *cuts, n]
    return [slice(a, b) for a, b in zip(edges, edges[1:])]


T, Y = regression(members=4, n=10)
P, PY = probabilities(members=3, n=10, classes=3)
L, LY = labels(members=5, n=10)


def _with(array, index, value):
    out = np.array(array, copy=True)
    out[index] = value
    return out
