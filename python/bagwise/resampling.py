"""Which training rows each ensemble member sees: `resample` and its `Resample` result."""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import math
from typing import Literal

import numpy as np

from . import _core
from ._display import plus_minus
from ._progress import ProgressArg, progress_callback
from ._results import Result
from ._validation import label_codes, n_jobs_value, positive_int, rng_seed

__all__ = ["Resample", "resample"]

SchemeName = Literal["bootstrap", "subsample", "bayesian", "little_bags"]
_SCHEMES = ("bootstrap", "subsample", "bayesian", "little_bags")
#: Members per group of ``scheme="little_bags"`` when ``group_size`` is not given.
DEFAULT_GROUP_SIZE = 2
#: Each member's share of the rows for little bags when an estimator's ``fraction`` is left
#: at 1.0: the smallest share measured in tests/bench/bench_little_bags.py, whose bias was
#: smallest (median ratio to the Monte-Carlo truth 1.15 ± 0.10 at 0.1, against 1.28 at 0.2
#: and 1.51 at 0.3; Friedman #1, n = 4000, 300 trees).
LITTLE_BAGS_FRACTION = 0.1


def _group_size_iv(group_size, scheme, n_members):
    """ℓ for little bags (default 2; at least 2; dividing ``n_members``), 0 otherwise."""
    if scheme != "little_bags":
        if group_size is not None:
            raise ValueError(f"`group_size`: only scheme='little_bags' groups members, not "
                             f"scheme={scheme!r}; leave group_size at None")
        return 0
    if group_size is None:
        group_size = DEFAULT_GROUP_SIZE
    return check_group_size(positive_int(group_size, "group_size"), n_members)


def check_group_size(group_size: int, n_members: int) -> int:
    """``group_size`` of little bags, checked: at least 2, dividing ``n_members``."""
    if group_size < 2:
        raise ValueError("`group_size`: must be at least 2 for scheme='little_bags' (the "
                         f"within-group variance needs two members), got {group_size}")
    if n_members % group_size:
        raise ValueError(f"`n_members`: must be a multiple of group_size ({group_size}) for "
                         f"scheme='little_bags' (members come in whole groups), got {n_members}")
    return group_size


def _resample_iv(n_rows, n_members, scheme, fraction, strata, groups, block_length, group_size,
                 rng, n_jobs):
    n_rows = positive_int(n_rows, "n_rows")
    n_members = positive_int(n_members, "n_members")
    if scheme not in _SCHEMES:
        raise ValueError(f"`scheme`: expected one of {_SCHEMES}, got {scheme!r}")
    if isinstance(fraction, bool) or not isinstance(fraction, (int, float, np.floating)):
        raise TypeError(f"`fraction`: expected a number, got {type(fraction).__name__}")
    fraction = float(fraction)
    group_size = _group_size_iv(group_size, scheme, n_members)
    given = [name for name, v in (("strata", strata), ("groups", groups),
                                  ("block_length", block_length)) if v is not None]
    if scheme == "little_bags":
        if given:
            raise ValueError(f"`{given[0]}`: scheme='little_bags' draws half-samples of "
                             "exchangeable rows; strata, groups and blocks are not supported "
                             "with it")
        if not 0 < fraction < 0.5:
            raise ValueError(
                "`fraction`: must lie in (0, 0.5) for scheme='little_bags' (each member's "
                f"share of all rows, drawn inside its group's half), got {fraction}; the "
                f"estimators use {LITTLE_BAGS_FRACTION} when it is left at 1.0")
        if n_rows < 2:
            raise ValueError(f"`n_rows`: scheme='little_bags' needs at least 2 rows, got {n_rows}")
    if len(given) > 1:
        raise ValueError(
            f"`{given[0]}`, `{given[1]}`: give at most one of strata, groups and block_length "
            "(combinations are not defined yet)"
        )
    strata_codes = label_codes(strata, n_rows, "strata") if strata is not None else None
    group_codes = label_codes(groups, n_rows, "groups") if groups is not None else None
    if block_length is not None:
        block_length = positive_int(block_length, "block_length")
        if block_length > n_rows:
            raise ValueError(f"`block_length`: must be at most n_rows ({n_rows}), got {block_length}")
    return (n_rows, n_members, scheme, fraction, strata_codes, group_codes, block_length,
            group_size, rng_seed(rng), n_jobs_value(n_jobs))


@contextlib.contextmanager
def _fits_in_memory(n_members: int, n_rows: int):
    """numpy's refusal of an absurd (n_members, n_rows) array ("array is too big", or its
    own MemoryError) as a ``MemoryError`` naming `n_members`."""
    try:
        yield
    except MemoryError:
        raise MemoryError(f"`n_members`: {n_members:,} members x {n_rows:,} rows do not fit "
                          "in memory") from None
    except ValueError as err:
        if "too big" not in str(err):
            raise
        raise MemoryError(f"`n_members`: {n_members:,} members x {n_rows:,} rows exceed the "
                          "largest possible array") from None


def resample(
    n_rows: int,
    n_members: int,
    *,
    scheme: SchemeName = "bootstrap",
    fraction: float = 1.0,
    strata=None,
    groups=None,
    block_length: int | None = None,
    group_size: int | None = None,
    rng: int | np.random.Generator | None = 0,
    n_jobs: int | None = None,
    progress: ProgressArg = False,
) -> Resample:
    """Draw the training rows of every ensemble member.

    Parameters
    ----------
    n_rows : int
        Number of training rows.
    n_members : int
        Number of ensemble members.
    scheme : {"bootstrap", "subsample", "bayesian", "little_bags"}
        ``"bootstrap"``: ``round(n_rows * fraction)`` draws with replacement (Efron 1979).
        ``"subsample"``: ``round(n_rows * fraction)`` distinct rows without replacement
        (subagging; Bühlmann & Yu 2002). ``"bayesian"``: Dirichlet(1, ..., 1) row weights
        scaled to sum to ``n_rows`` (Rubin 1981); this scheme has no counts and no
        out-of-bag rows. ``"little_bags"``: the bootstrap of little bags (Sexton & Laake
        2009; Athey, Tibshirani & Wager 2019, §4): members come in consecutive groups of
        ``group_size``; each group draws a half-sample of ``n_rows // 2`` distinct rows and
        each of its members ``round(n_rows * fraction)`` distinct rows of that half (0/1
        counts). `prediction_variance` with ``method="little_bags"`` then gives standard
        errors from a number of members that does not grow with ``n_rows``.
    fraction : float
        Draw size as a share of ``n_rows``: in (0, 1] for subsampling, any positive value
        for the bootstrap, 1 for Bayesian weights, in (0, 0.5) for little bags (each
        member's share of all rows).
    strata : array-like of labels, optional
        Resample within each stratum, so each keeps ``round(size * fraction)`` rows (its
        exact size when ``fraction=1``).
    groups : array-like of labels, optional
        Resample whole groups (cluster bootstrap); all rows of a group share its count.
    block_length : int, optional
        Moving-block bootstrap for ordered rows (Künsch 1989): blocks of this many
        consecutive rows, drawn with replacement until the draw size is reached.
    group_size : int, optional
        Members per group of ``scheme="little_bags"`` (default 2, at least 2, dividing
        ``n_members``); other schemes do not group members and refuse it.
    rng : int, numpy.random.Generator or None
        Seed of the member streams (default 0). An int seeds them directly; a Generator
        gives the seed ``int(rng.integers(2**63))``; ``None`` draws a fresh one. The seed
        used is kept in ``Resample.seed``. Member ``m`` always uses stream ``m``, so results
        do not depend on ``n_jobs`` and the first members do not change when ``n_members``
        grows (for little bags: by whole groups; a group's half comes from the stream of
        its first member).
    n_jobs : int, optional
        Worker threads (default: all cores).
    progress : bool or callable
        ``True`` shows a tqdm bar; a callable receives ``(done, total)`` members.

    Returns
    -------
    Resample

    Examples
    --------
    >>> import bagwise
    >>> draw = bagwise.resample(1000, 200, rng=1)
    >>> draw.counts.shape, draw.counts.dtype
    ((200, 1000), dtype('uint8'))
    >>> bool((draw.counts.sum(axis=1) == 1000).all())
    True
    >>> round(float(draw.out_of_bag.mean()), 2)  # close to (1 - 1/n)^n ≈ 0.368
    0.37
    """
    (n_rows, n_members, scheme, fraction, strata_codes, group_codes, block_length, group_size,
     seed, n_jobs) = _resample_iv(n_rows, n_members, scheme, fraction, strata, groups,
                                  block_length, group_size, rng, n_jobs)
    plan = _core.Resampler(
        n_rows,
        scheme,
        fraction,
        strata=None if strata_codes is None else strata_codes[0],
        groups=None if group_codes is None else group_codes[0],
        block_length=block_length,
        group_size=group_size,
    )
    with progress_callback(progress, "resampling") as callback, _fits_in_memory(n_members, n_rows):
        if scheme == "bayesian":
            counts, weights = None, plan.bayesian_weights(seed, n_members, n_jobs, callback)
        else:
            counts, weights = plan.counts(seed, n_members, n_jobs, callback), None
    if strata_codes is not None:
        design, labels = "strata", strata_codes
    elif group_codes is not None:
        design, labels = "groups", group_codes
    elif block_length is not None:
        design, labels = "blocks", None
    else:
        design, labels = "rows", None
    return Resample(
        n_rows=n_rows, n_members=n_members, scheme=scheme, fraction=fraction, design=design,
        block_length=block_length, seed=seed, draws_per_member=plan.draws_per_member,
        group_size=group_size, _labels=labels, _counts=counts, _weights=weights,
    )


@dataclasses.dataclass(frozen=True, repr=False, eq=False)
class Resample(Result):
    """The rows drawn for every member of an ensemble.

    Attributes
    ----------
    n_rows, n_members : int
        Shape of the draw: ``(n_members, n_rows)``.
    scheme : str
        ``"bootstrap"``, ``"subsample"``, ``"bayesian"`` or ``"little_bags"``.
    fraction : float
        Draw size as a share of the rows (of each stratum, or of the groups; for little
        bags, of all rows).
    design : str
        ``"rows"``, ``"strata"``, ``"groups"`` or ``"blocks"``.
    block_length : int or None
        Length of the moving blocks (block design only).
    seed : int
        The integer seed of the member streams actually used (also when ``rng`` was a
        Generator or ``None``).
    draws_per_member : int
        Rows drawn per member (expected rows for group designs, whose draws vary).
    group_size : int
        Members per little-bags group (members ``g * group_size`` to
        ``(g + 1) * group_size - 1`` share a half-sample); 0 for the other schemes.
    counts : ndarray of unsigned int, shape (n_members, n_rows)
        In-bag count of every row in every member, in the narrowest unsigned dtype that
        holds the largest count drawn (uint8 unless a row is drawn over 255 times); counts
        never wrap around. Not defined for ``scheme="bayesian"`` (raises ``ValueError``).
    out_of_bag : ndarray of bool, shape (n_members, n_rows)
        ``counts == 0``; made on first access.
    row_weights : ndarray of float64, shape (n_members, n_rows)
        Row weights: the counts as floats (made on first access) or the Bayesian weights.
    """

    _title = "Resample"

    n_rows: int
    n_members: int
    scheme: str
    fraction: float
    design: str
    block_length: int | None
    seed: int
    draws_per_member: int
    group_size: int
    _labels: tuple | None = dataclasses.field(repr=False)
    _counts: np.ndarray | None = dataclasses.field(repr=False)
    _weights: np.ndarray | None = dataclasses.field(repr=False)

    # -- arrays -------------------------------------------------------------------------
    @property
    def counts(self) -> np.ndarray:
        if self._counts is None:
            raise ValueError(
                "`counts`: not defined for scheme='bayesian' - every row gets a positive "
                "continuous weight, so no row is out of bag; use `row_weights`"
            )
        return self._counts

    @functools.cached_property
    def out_of_bag(self) -> np.ndarray:
        if self._counts is None:
            raise ValueError(
                "`out_of_bag`: not defined for scheme='bayesian' - every row has a "
                "positive weight in every member"
            )
        return self._counts == 0

    @functools.cached_property
    def row_weights(self) -> np.ndarray:
        if self._weights is None:
            return self._counts.astype(np.float64)
        return self._weights

    @property
    def strata(self) -> np.ndarray | None:
        """Stratum label of every row (strata design), else ``None``."""
        return self._labels[1][self._labels[0]] if self.design == "strata" else None

    @property
    def groups(self) -> np.ndarray | None:
        """Group label of every row (group design), else ``None``."""
        return self._labels[1][self._labels[0]] if self.design == "groups" else None

    @property
    def block_starts(self) -> np.ndarray:
        """First row of every moving block, shape (n_members, blocks per member).

        Redrawn from the same member streams as ``counts``, so the two always agree; the
        last block of a member is cut short when the draw size is not a multiple of
        ``block_length``.
        """
        if self.design != "blocks":
            raise ValueError("`block_starts`: only defined when `block_length` was given")
        plan = _core.Resampler(self.n_rows, self.scheme, self.fraction,
                               block_length=self.block_length)
        return plan.block_starts(self.seed, self.n_members)

    # -- summaries ----------------------------------------------------------------------
    def out_of_bag_share(self) -> np.ndarray:
        """Share of rows that each member leaves out, shape (n_members,)."""
        return self.out_of_bag.mean(axis=1)

    def expected_out_of_bag_share(self) -> float:
        """Share of rows a member is expected to leave out, under the scheme and design.

        Bootstrap over rows: ``(1 - 1/n)**d`` for ``d`` draws (Efron & Tibshirani 1993);
        subsampling and little bags (a member's rows are a uniform subset of all rows):
        ``1 - d/n``. Strata and groups apply the same formulas per unit and
        weight them by size; blocks: a row is missed by every block that could cover it.
        ``nan`` for Bayesian weights.
        """
        if self.scheme == "bayesian":
            return math.nan
        if self.design == "strata":
            sizes = np.bincount(self._labels[0])
            sizes = sizes[sizes > 0]
            draws = np.maximum(1, np.round(sizes * self.fraction))
            if self.scheme == "bootstrap":
                miss = (1 - 1 / sizes) ** draws
            else:
                miss = 1 - np.minimum(draws, sizes) / sizes
            return float(np.sum(sizes * miss) / self.n_rows)
        if self.design == "groups":
            sizes = np.bincount(self._labels[0])
            sizes = sizes[sizes > 0]
            g = len(sizes)
            draws = max(1, round(g * self.fraction))
            miss = (1 - 1 / g) ** draws if self.scheme == "bootstrap" else 1 - min(draws, g) / g
            return float(miss)
        n = self.n_rows
        if self.design == "blocks":
            length = self.block_length
            starts = n - length + 1
            blocks = -(-self.draws_per_member // length)
            rows = np.arange(n)
            covering = np.minimum(rows, starts - 1) - np.maximum(0, rows - length + 1) + 1
            # A row is out of bag when no block covers it, the last (maybe shorter) one too.
            last = self.draws_per_member - (blocks - 1) * length
            covering_last = np.clip(np.minimum(rows, starts - 1) - np.maximum(0, rows - last + 1) + 1,
                                    0, None)
            miss = (1 - covering / starts) ** (blocks - 1) * (1 - covering_last / starts)
            return float(miss.mean())
        d = self.draws_per_member
        if self.scheme == "bootstrap":
            return float((1 - 1 / n) ** d)
        return 1 - min(d, n) / n

    def _rows(self) -> list[tuple[str, str]]:
        rows = [
            ("scheme", self.scheme if self.fraction == 1 else f"{self.scheme} ({self.fraction:g})"),
            ("design", self.design + (f" (length {self.block_length})"
                                      if self.design == "blocks" else "")),
            ("members x rows", f"{self.n_members:,} x {self.n_rows:,}"),
            ("draws per member", f"{self.draws_per_member:,}"),
        ]
        if self.group_size:
            rows.append(("groups", f"{self.n_members // self.group_size:,} of "
                                   f"{self.group_size}, each in a half of "
                                   f"{self.n_rows // 2:,} rows"))
        rows += [
            ("seed", str(self.seed)),
        ]
        if self._counts is not None:
            share = self.out_of_bag_share()
            se = share.std(ddof=1) / math.sqrt(len(share)) if len(share) > 1 else math.nan
            rows += [
                ("counts dtype", str(self._counts.dtype)),
                ("largest count", str(int(self._counts.max()))),
                ("out-of-bag share", plus_minus(f"{share.mean():.4f}", se, f"{se:.4f}")),
                ("expected share", f"{self.expected_out_of_bag_share():.4f}"),
            ]
        else:
            rows.append(("weights", "Dirichlet(1, ..., 1) x n_rows; no counts"))
        return rows

    def _reading(self) -> str:
        if self._counts is None:
            return "every row carries a positive weight in every member: no out-of-bag rows"
        share = self.out_of_bag_share().mean()
        return f"each member leaves out {share:.1%} of the rows on average"

    def to_frame(self):
        """One row per member: draw size, distinct rows, out-of-bag share, largest count.

        For Bayesian weights: smallest, largest and spread of the weights instead.
        """
        import pandas as pd

        member = np.arange(self.n_members)
        if self._counts is None:
            w = self._weights
            return pd.DataFrame({"member": member, "weight_min": w.min(axis=1),
                                 "weight_max": w.max(axis=1), "weight_std": w.std(axis=1)})
        c = self._counts
        return pd.DataFrame({
            "member": member,
            "rows_drawn": c.sum(axis=1, dtype=np.int64),
            "distinct_rows": (c > 0).sum(axis=1),
            "out_of_bag_share": self.out_of_bag_share(),
            "largest_count": c.max(axis=1).astype(np.int64),
        })
