"""Write the example notebooks from the cell sources below and execute them in place.

    python notebooks/build.py              # write and execute every notebook
    python notebooks/build.py 02 05        # only the notebooks whose names start so
    python notebooks/build.py --no-execute # write the cells without outputs

Each notebook is a list of cells made with ``md(...)`` (markdown) or ``code(...)``. The
notebooks run with ``notebooks/`` as the working directory, in the ``python3`` kernel of
the interpreter running this script, and are written with their outputs so they read well
without running. Edit the cells here, never the ``.ipynb`` files.
"""

from __future__ import annotations

import sys
import textwrap
import time
from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

HERE = Path(__file__).resolve().parent


def md(text: str):
    return new_markdown_cell(textwrap.dedent(text).strip())


def code(text: str):
    return new_code_cell(textwrap.dedent(text).strip())


VINEYARDS = code("""
    import numpy as np
    import matplotlib.pyplot as plt
    from sklearn.model_selection import train_test_split

    import bagwise
    from bagwise.datasets import feature_matrix, load_vineyards

    data = load_vineyards()                      # shipped in the package
    X, feature_names = feature_matrix(data)      # nine numeric readings per vine
    y = data["yield_kg"]
    print(f"{len(y)} vines, readings: {', '.join(feature_names)}")
""")

# -- 1. does bagging help --------------------------------------------------------------------

DOES_BAGGING_HELP = [
    md("""
    # Does bagging help my learner?

    Bagging fits many copies of a learner, each on a bootstrap resample of the training
    rows, and averages their predictions. It helps a learner whose fit changes a lot when
    the rows change (an *unstable* learner, such as a deep regression tree) and does next
    to nothing for a *stable* one (such as least squares).

    This notebook measures that on the bundled vineyard data (yield of 3,000 vines from
    nine readings) for three learners: trees, a linear model and nearest neighbours. You
    will learn to compare a single model with its bagged version on held-out vines, and to
    read the **ambiguity decomposition**, which says exactly how much of the members' error
    the averaging removed.
    """),
    VINEYARDS,
    code("""
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=1000, random_state=0)
    # Nearest neighbours measure distances, so put every reading on the same scale
    # (trees and least squares give the same fit either way).
    centre, scale = X_train.mean(axis=0), X_train.std(axis=0)
    X_train, X_test = (X_train - centre) / scale, (X_test - centre) / scale
    print(f"{len(y_train)} training vines, {len(y_test)} test vines")
    """),
    md("""
    ## A single model against its bagged version

    `members=1, scheme="none"` fits one model on all training rows; `members=100` fits 100
    members, each on its own bootstrap resample, and averages them. Both are scored by the
    mean squared error on the 1,000 test vines. A ratio below 1 means bagging helped.
    """),
    code("""
    learners = ["tree", "linear", "neighbors"]
    single = {name: bagwise.BagRegressor(name, n_members=1, scheme="none").fit(X_train, y_train)
              for name in learners}
    bagged = {name: bagwise.BagRegressor(name, n_members=100, random_state=0).fit(X_train, y_train)
              for name in learners}

    def test_error(model):
        return float(np.mean((model.predict(X_test) - y_test) ** 2))

    ratio = {}
    for name in learners:
        s, b = test_error(single[name]), test_error(bagged[name])
        ratio[name] = b / s
        print(f"{name:>9}: single {s:.3f}  bagged {b:.3f}  ratio {ratio[name]:.3f}")
    """),
    md("""
    ## What averaging removed

    For squared error the ambiguity decomposition (Krogh & Vedelsby 1995) holds exactly at
    every point:

    > ensemble loss = mean member loss − ambiguity

    The *ambiguity* is the spread of the members around their average. It is what averaging
    takes away, and it needs no single model to compare with: only the members'
    predictions on labelled points.
    """),
    code("""
    parts = {name: bagwise.decompose(bagged[name].member_predictions(X_test), y_test)
             for name in learners}
    parts["tree"]
    """),
    code("""
    for name, d in parts.items():
        print(f"{name:>9}: member loss {d.member_loss:.3f}  ambiguity {d.ambiguity:.3f}  "
              f"ensemble loss {d.ensemble_loss:.3f}  removed {d.relative_gain:.1%}")
    """),
    md("""
    The same three numbers by hand, from the members' predictions with plain numpy: each
    member's own test error, averaged; the members' spread around their average; and the
    error of the bag's own `predict`.
    """),
    code("""
    for name in learners:
        members = bagged[name].member_predictions(X_test)
        by_hand = np.mean((members - y_test) ** 2)
        spread = np.mean((members - members.mean(axis=0)) ** 2)
        print(f"{name:>9} by hand: member loss {by_hand:.3f}  spread {spread:.3f}  "
              f"predict error {test_error(bagged[name]):.3f}")
    """),
    code("""
    fig, ax = plt.subplots(figsize=(7, 3.4))
    rows = np.arange(len(learners))
    ensemble = [parts[n].ensemble_loss for n in learners]
    ambiguity = [parts[n].ambiguity for n in learners]
    ax.barh(rows, ensemble, color="0.35", label="ensemble loss (what is left)")
    ax.barh(rows, ambiguity, left=ensemble, color="0.75", hatch="//",
            label="ambiguity (removed by averaging)")
    ax.plot([test_error(single[n]) for n in learners], rows, "k|", markersize=25,
            label="single model")
    ax.set_yticks(rows, learners)
    ax.set_xlabel("mean squared error on test vines (kg²)")
    ax.set_title("Mean member loss = ensemble loss + ambiguity")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.25), ncol=3, fontsize=8)
    fig.tight_layout()
    """),
    md("""
    ## The same question without a test set

    A test set costs rows. `bagwise.compare_learners` answers from the training vines
    alone: each vine's out-of-bag error (from the members that never saw it) against the
    cross-validated error of a single model of the same learner, with a 95% interval for
    their ratio from the paired vines. The verdict is read off the interval: "helps",
    "hurts" or "no clear difference" (a change within 1% counts as none).
    """),
    code("""
    table = bagwise.compare_learners(X_train, y_train, learners, n_members=100, random_state=0)
    table
    """),
    md("""
    ## Reading the result

    * **Trees.** Each member is a little *worse* than the single tree (it saw only about
      63% of the distinct rows), but the members disagree so much that averaging removes
      about half of their loss, and the bag beats the single tree by a wide margin.
    * **Linear model.** The members hardly differ: the ambiguity is a fraction of a
      percent of the member loss, and the bag is the single fit again. Bagging a stable
      learner only costs compute.
    * **Nearest neighbours.** In between: some gain, much less than for trees.

    The rule of thumb: bagging pays when the ambiguity is a large share of the mean member
    loss (`relative_gain`), and you can read that share from any bagged model's members.
    """),
    code("""
    best = min(learners, key=lambda n: parts[n].ensemble_loss)
    print(f"lowest test error: bagged {best}; bagging changed the tree's error by "
          f"{ratio['tree'] - 1:+.0%}, the linear model's by {ratio['linear'] - 1:+.1%}")
    """),
]

# -- 2. how many members -----------------------------------------------------------------

HOW_MANY_MEMBERS = [
    md("""
    # How many members do I need?

    More members never hurt a bagged model's expected squared error, but each one costs
    time and memory, and past some size the gain is too small to matter. For members fit on
    independent resamples the expected loss of an ensemble of *k* members follows an exact
    law:

    > E[loss(k)] = loss(∞) + W / k

    where *W* is the average variance of the members around their mean. From one fitted
    ensemble we can therefore estimate the loss an infinite ensemble would reach and the
    size that comes within 1% or 5% of it. You will learn to read that curve on test
    vines, and to get the same answer without a test set from the out-of-bag error.
    """),
    VINEYARDS,
    code("""
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=1000, random_state=0)
    model = bagwise.BagRegressor("tree", n_members=200, random_state=0).fit(X_train, y_train)
    test_members = model.member_predictions(X_test)       # (200 members, 1000 test vines)
    curve = bagwise.size_curve(test_members, y_test, orders=20, rng=0)
    curve
    """),
    md("""
    `size_curve` scores the ensemble of the first *k* members, for *k* on a grid, averaged
    over 20 random member orders. Next to it the law, computed from the 200 members alone:
    the two agree within the curve's own standard error at every size.
    """),
    code("""
    table = curve.to_frame()
    table["gap / standard error"] = (table["loss"] - table["law"]) / table["std_error"]
    print(table.iloc[::3].round(4).to_string(index=False))
    worst_gap = float(np.max(np.abs(table["loss"] - table["law"]) / table["law"]))
    print(f"largest gap between curve and law: {worst_gap:.2%} of the law")
    """),
    code("""
    within_1 = curve.members_needed(0.01)
    within_5 = curve.members_needed(0.05)
    print(f"loss of an infinite ensemble: {curve.infinite_loss:.4f} (200 members: {curve.ensemble_loss:.4f})")
    print(f"members within 5% of it: {within_5}")
    print(f"members within 1% of it: {within_1}")
    """),
    md("""
    A check by hand: draw many random ensembles of those sizes from the 200 members, score
    each on the test vines with plain numpy, and compare the mean with loss(∞).
    """),
    code("""
    draws = np.random.default_rng(1)
    for size in (within_5, within_1):
        losses = [np.mean((test_members[draws.choice(200, size, replace=False)].mean(axis=0)
                           - y_test) ** 2) for _ in range(400)]
        print(f"random ensembles of {size} members: mean loss {np.mean(losses):.4f} "
              f"± {np.std(losses, ddof=1) / np.sqrt(400):.4f}, "
              f"{np.mean(losses) / curve.infinite_loss - 1:.2%} above loss(∞)")
    """),
    md("""
    ## Without a test set: the out-of-bag curve

    Every training vine was left out of about 37% of the resamples. Averaging only those
    members gives an honest prediction for the vine (Breiman 1996), and the error of these
    predictions estimates the test error. `bagwise.out_of_bag` reads the members'
    predictions on the training rows and the in-bag counts (`model.in_bag_`); it uses only
    the entries whose count is zero.

    The out-of-bag curve at *k* members lags the test curve: each vine is predicted by only
    about *k*/e ≈ 0.37 *k* of the first *k* members, so it needs more members to flatten.
    """),
    code("""
    oob = bagwise.out_of_bag(model.member_predictions(X_train), model.in_bag_, y_train)
    print(f"out-of-bag error: {oob.ensemble_loss:.4f}")
    print(f"test error: {curve.ensemble_loss:.4f}")
    oob
    """),
    code("""
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.fill_between(curve.sizes, curve.curve - 2 * curve.std_error,
                    curve.curve + 2 * curve.std_error, color="0.85",
                    label="test curve ± 2 standard errors")
    ax.plot(curve.sizes, curve.curve, "o", color="k", markersize=4, label="test curve")
    k = np.arange(1, 2001)
    ax.plot(k, curve.law(k), "-", color="0.3", label="law: loss(∞) + W/k")
    ax.axhline(curve.infinite_loss, color="0.3", linestyle=":", label="loss(∞)")
    ax.axvline(within_1, color="0.5", linestyle="--", label=f"within 1%: {within_1} members")
    ax.plot(oob.sizes, oob.curve, "s--", color="0.55", markersize=4,
            label="out-of-bag curve (training vines)")
    ax.set_xscale("log")
    ax.set_xlabel("members in the ensemble")
    ax.set_ylabel("mean squared error (kg²)")
    ax.legend(fontsize=8)
    fig.tight_layout()
    """),
    md("""
    ## Reading the result

    The first few members buy almost all of the gain; the curve is already close to
    loss(∞) at a few dozen members. `members_needed(0.05)` and `members_needed(0.01)` turn
    that into a number: beyond the 1% size, extra members change the expected error by less
    than 1% of what an infinite ensemble would reach. The out-of-bag error tells the same
    story from the training rows alone, which is what you have when no test set can be
    spared.
    """),
]

# -- 3. standard errors ------------------------------------------------------------------

STANDARD_ERRORS = [
    md("""
    # A standard error for every prediction

    A bagged model's prediction at a point would change if the training rows were drawn
    again. The **infinitesimal jackknife** (Efron 2014) estimates that variance from the
    ensemble you already have: how strongly each member's prediction goes with how often
    each training row was drawn. With the bias correction of Wager, Hastie & Efron (2014)
    it needs members numbering in the thousands, which for trees is cheap.

    You will learn to get a standard error for every test vine, to check those standard
    errors against what refitting on fresh vines actually does, to see why an interval of
    ± 2 standard errors does *not* cover the next vine's yield, and to split the members'
    variance into the part that more members average away and the part they cannot.
    """),
    VINEYARDS,
    code("""
    # 1,000 test vines; the other 2,000 make four disjoint training sets of 500 vines.
    order = np.random.default_rng(0).permutation(len(y))
    test, training_sets = order[:1000], order[1000:].reshape(4, 500)
    X_test, y_test = X[test], y[test]

    def fit(rows, seed):
        bag = bagwise.BagRegressor("tree", n_members=4000, min_leaf=10, random_state=seed)
        return bag.fit(X[rows], y[rows])

    model = fit(training_sets[0], seed=0)
    test_members = model.member_predictions(X_test)
    se = bagwise.prediction_variance(test_members, model.in_bag_)   # IJ, bias-corrected
    se
    """),
    md("""
    Each test vine's estimate comes with its Monte-Carlo *noise* (how much it would move if
    the members were drawn again) and a *status*: "steady" when that noise is at most 20%
    of the estimate, "not estimable" when the estimate is within its noise of zero. The
    table counts them, and `se.members_needed()` says how many members would make the
    typical vine steady; a standard error that is not estimable is never shown as a number.

    ## Do the standard errors match reality?

    We refit the same model on the three other training sets of 500 vines and look at how
    much the prediction at each test vine moves. Its variance across the four fits is what
    the standard error claims to estimate.
    """),
    code("""
    fits = [se.mean] + [fit(rows, seed=r).predict(X_test) for r, rows in enumerate(training_sets[1:], 1)]
    refit_variance = np.var(fits, axis=0, ddof=1)
    print(f"mean variance across refits: {refit_variance.mean():.4f}")
    print(f"mean predicted variance: {se.variance.mean():.4f}")
    print(f"refit / predicted: {refit_variance.mean() / se.variance.mean():.3f}")
    """),
    code("""
    bins = np.digitize(se.std_error, np.quantile(se.std_error, [0.2, 0.4, 0.6, 0.8]))
    abs_error = np.abs(y_test - se.mean)
    print("fifth of test vines   predicted se   refit spread   |yield - prediction|")
    for b in range(5):
        inside = bins == b
        print(f"{b + 1:>18}   {se.std_error[inside].mean():12.3f}   "
              f"{np.sqrt(refit_variance[inside].mean()):12.3f}   {abs_error[inside].mean():18.3f}")
    """),
    md("""
    Vines with a larger predicted standard error do move more between refits, and the
    overall size agrees. The range is compressed (the smallest standard errors are a
    little too small, the largest a little too large) because each vine's estimate is
    itself noisy, but over all test vines their size matches the refits.
    The observed error against the real yield is much larger than the
    standard error everywhere: most of it is the vine's own variation, which no amount of
    training data removes.

    ## Intervals

    `se.mean_interval(0.95)` is the prediction ± 1.96 standard errors: an interval for what the
    *model* would predict, not for the next vine. For the vine's yield use
    `model.prediction_interval(X, level)`: the jackknife+-after-bootstrap of Kim, Xu & Barber
    (2020), calibrated on the out-of-bag residuals of the training vines, so it needs no
    test set.
    """),
    code("""
    low, high = se.mean_interval(0.95)
    model_only = np.mean((y_test >= low) & (y_test <= high))
    interval = model.prediction_interval(X_test, level=0.95)
    print(f"share of yields inside the ensemble-mean interval: {model_only:.3f}")
    print(f"share of yields inside the 95% prediction interval: {interval.coverage(y_test):.3f}")
    interval
    """),
    md("""
    ## Between and within

    Each member's prediction varies for two reasons: the training data (shared by all
    members, the *between* part) and its own resample (the *within* part). With ρ the
    between share, an ensemble of M members has variance ρσ² + (1 − ρ)σ²/M (Hastie,
    Tibshirani & Friedman 2009, eq. 15.1): more members shrink only the within part.
    """),
    code("""
    split = bagwise.spread(test_members, model.in_bag_)
    print(f"pooled rho: {split.pooled_rho:.3f}")
    split
    """),
    code("""
    fig, (left, right) = plt.subplots(1, 2, figsize=(9, 3.5))
    predicted = [se.std_error[bins == b].mean() for b in range(5)]
    refit = [np.sqrt(refit_variance[bins == b].mean()) for b in range(5)]
    left.plot(predicted, refit, "o-", color="0.3", label="fifths of the test vines")
    left.plot([0, 0.5], [0, 0.5], "k--", label="ideal: equal")
    left.set_xlabel("predicted standard error (kg)")
    left.set_ylabel("spread across 4 refits (kg)")
    left.legend(fontsize=8)
    right.hist(split.rho, bins=30, color="0.6")
    right.set_xlabel("ρ: share of member variance from the training data")
    right.set_ylabel("test vines")
    fig.tight_layout()
    """),
]

# -- 4. your own estimator -----------------------------------------------------------------

OWN_ESTIMATOR = [
    md("""
    # Bagging your own scikit-learn estimator

    `bagwise.BagRegressor` accepts any scikit-learn regressor, including a whole
    `Pipeline`: every member is a clone fit on its own resample, and the bag is itself a
    scikit-learn estimator, so it works inside `cross_val_score` and `GridSearchCV`. Its
    diagnostics come from the same two things as for the native learners: the members'
    predictions and the in-bag counts.

    You will learn to bag a scaler + nearest-neighbours pipeline, tune it by cross
    validation, and read its out-of-bag error and decomposition.
    """),
    VINEYARDS,
    code("""
    from sklearn.model_selection import GridSearchCV, KFold, cross_val_score
    from sklearn.neighbors import KNeighborsRegressor
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=1000, random_state=0)
    pipeline = make_pipeline(StandardScaler(), KNeighborsRegressor(n_neighbors=10))
    bag = bagwise.BagRegressor(pipeline, n_members=50, random_state=0)
    folds = KFold(5, shuffle=True, random_state=0)
    """),
    md("""
    ## Cross validation, single pipeline against the bag
    """),
    code("""
    single_cv = -cross_val_score(pipeline, X_train, y_train, cv=folds,
                                 scoring="neg_mean_squared_error").mean()
    bag_cv = -cross_val_score(bag, X_train, y_train, cv=folds,
                              scoring="neg_mean_squared_error").mean()
    print(f"single pipeline, cross-validated error: {single_cv:.4f}")
    print(f"bagged pipeline, cross-validated error: {bag_cv:.4f}")
    """),
    md("""
    ## Tuning a member parameter

    The pipeline's parameters are reached through `learner__`, so a grid search tunes the
    members of the bag directly.
    """),
    code("""
    search = GridSearchCV(bag, {"learner__kneighborsregressor__n_neighbors": [5, 10, 20]},
                          cv=folds, scoring="neg_mean_squared_error").fit(X_train, y_train)
    for k, score in zip([5, 10, 20], search.cv_results_["mean_test_score"]):
        print(f"neighbours {k:>2}: cross-validated error {-score:.4f}")
    best = search.best_estimator_        # refit on all training vines
    best_k = search.best_params_["learner__kneighborsregressor__n_neighbors"]
    print(f"best neighbours: {best_k}")
    """),
    md("""
    ## Out-of-bag error: a second opinion for free

    The refit bag already holds an error estimate: the out-of-bag error, which uses for
    every training vine only the members that never saw it. It needs no folds and no extra
    fits, and it should agree with the cross-validated error of the same bag.
    """),
    code("""
    oob = bagwise.out_of_bag(best.member_predictions(X_train), best.in_bag_, y_train)
    test_error = float(np.mean((best.predict(X_test) - y_test) ** 2))
    print(f"out-of-bag error: {oob.ensemble_loss:.4f}")
    print(f"cross-validated error: {-search.best_score_:.4f}")
    print(f"test error: {test_error:.4f}")
    """),
    code("""
    parts = bagwise.decompose(best.member_predictions(X_test), y_test)
    print(f"share removed by averaging: {parts.relative_gain:.3f}")
    parts
    """),
    md("""
    ## Reading the result

    The out-of-bag error comes within a few percent of the cross-validated one at no extra
    cost. The decomposition shows that averaging nearest-neighbour pipelines removes a
    modest share of their loss: neighbours are fairly stable learners, so the bag gains
    less than a bag of trees would (see the first notebook).
    """),
]

# -- 5. an ensemble fitted elsewhere -----------------------------------------------------------

FITTED_ELSEWHERE = [
    md("""
    # Diagnosing an ensemble fitted elsewhere

    bagwise does not need to fit the ensemble. Every diagnostic reads two arrays: the
    members' predictions at some points, shaped (members, points), and for the out-of-bag
    error and the standard errors the in-bag counts, shaped (members, training rows), that
    say how often each member drew each row.

    Here the ensemble is scikit-learn's `BaggingRegressor` of regression trees on the
    diabetes data bundled with scikit-learn. You will learn to read those arrays off it in
    one call and get its out-of-bag error, decomposition, size curve, member correlation,
    standard errors and prediction intervals.
    """),
    code("""
    import numpy as np
    from sklearn.datasets import load_diabetes
    from sklearn.ensemble import BaggingRegressor
    from sklearn.model_selection import train_test_split
    from sklearn.tree import DecisionTreeRegressor

    import bagwise

    X, y = load_diabetes(return_X_y=True)
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.25, random_state=0)
    ensemble = BaggingRegressor(DecisionTreeRegressor(min_samples_leaf=20), n_estimators=2000,
                                oob_score=True, random_state=0).fit(X_train, y_train)
    print(f"{len(ensemble.estimators_)} trees, {len(y_train)} training rows, {len(y_test)} test rows")
    """),
    md("""
    ## The arrays, in one call

    `bagwise.read_ensemble` reads them off the fitted model: the in-bag counts from the rows
    each member drew (`estimators_samples_`, with repeats), and each member's predictions
    on the features it was given, at the test rows and at the training rows.
    """),
    code("""
    arrays = bagwise.read_ensemble(ensemble, X_test, X_train=X_train, y_train=y_train)
    counts, test_members, train_members = arrays.counts, arrays.members, arrays.train_members
    print("counts", counts.shape, "train", train_members.shape, "test", test_members.shape)
    arrays
    """),
    md("""
    ## Out-of-bag error

    Our out-of-bag predictions should be scikit-learn's own `oob_prediction_`.
    """),
    code("""
    oob = bagwise.out_of_bag(train_members, counts, y_train)
    difference = float(np.max(np.abs(oob.prediction - ensemble.oob_prediction_)))
    print(f"largest difference from oob_prediction_: {difference:.3g}")
    r2 = 1 - oob.ensemble_loss / y_train.var()
    print(f"out-of-bag R²: {r2:.4f} (scikit-learn: {ensemble.oob_score_:.4f})")
    oob
    """),
    md("""
    ## What averaging removed, and how many members were needed
    """),
    code("""
    parts = bagwise.decompose(test_members, y_test)
    test_mse = float(np.mean((ensemble.predict(X_test) - y_test) ** 2))
    print(f"ensemble loss {parts.ensemble_loss:.2f} (from ensemble.predict: {test_mse:.2f})")
    parts
    """),
    code("""
    curve = bagwise.size_curve(test_members, y_test, rng=0)
    print(f"members within 5% of an infinite ensemble: {curve.members_needed(0.05)}")
    print(f"members within 1% of an infinite ensemble: {curve.members_needed(0.01)}")
    curve
    """),
    code("""
    bagwise.correlation(test_members, y_test)
    """),
    md("""
    ## Standard errors

    The infinitesimal jackknife needs only the test predictions and the counts.
    """),
    code("""
    se = bagwise.prediction_variance(test_members, counts)
    print(se.status_counts(), "members for steady estimates:", se.members_needed())
    se
    """),
    md("""
    Each estimate carries its Monte-Carlo noise and a status; a standard error that is not
    steady is reported as such rather than as a number. For a new patient's outcome, the
    interval to use is the prediction interval, calibrated on the out-of-bag residuals:
    """),
    code("""
    interval = bagwise.prediction_interval(test_members, counts, train_members, y_train, level=0.9)
    print(f"share of test outcomes inside the 90% interval: {interval.coverage(y_test):.3f}")
    interval
    """),
    md("""
    ## Reading the result

    The out-of-bag predictions are scikit-learn's own, so the arrays were read right.
    The members' errors are strongly shared (high residual correlation), which is why
    averaging removes only part of their loss and why a few dozen members already come
    close to the infinite ensemble. The prediction interval is wide next to the standard
    errors of the ensemble's mean: most of the remaining error is not the ensemble's
    variance but what the ten measurements cannot explain.
    """),
]

# -- 6. more than one machine ---------------------------------------------------------------

MORE_THAN_ONE_MACHINE = [
    md("""
    # More than one machine

    When the member predictions, or the training rows, outgrow one machine, the same
    bagwise calls run on a Dask cluster: give them dask arrays (or a dask DataFrame, a zarr
    array, or a memory-mapped `.npy` file) and they compute where the chunks live. The
    answers are the ones you would get in memory: the same fitted members, bit for bit, and
    the same diagnostics to rounding (1e-12).

    This notebook starts a small cluster on this machine (two worker processes), fits a
    bagged tree ensemble of the bundled vineyard data on it, predicts and diagnoses lazily,
    and reads a member matrix from a file on disk. On a real cluster only the first cell
    changes: connect a `Client` to your scheduler instead.
    """),
    code("""
    import logging

    import dask.array as da
    from dask.distributed import Client, LocalCluster

    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                           dashboard_address=":0", silence_logs=logging.ERROR)
    client = Client(cluster)
    print(f"{len(client.scheduler_info()['workers'])} workers")
    """),
    VINEYARDS,
    code("""
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=1000, random_state=0)
    # Lazy copies, chunked along the rows: 400 training and 250 test vines per chunk.
    X_train_lazy = da.from_array(X_train, chunks=(400, -1))
    y_train_lazy = da.from_array(y_train, chunks=400)
    X_test_lazy = da.from_array(X_test, chunks=(250, -1))
    """),
    md("""
    ## Fitting on the workers

    With dask inputs and a client active, `fit` sends the training rows once to each
    worker and fits groups of consecutive members there. Every member draws its bootstrap
    resample and its splits from its own random stream, so where it is fitted does not
    matter: the ensemble is the one a fit on this machine gives with the same seed.
    """),
    code("""
    on_cluster = bagwise.BagRegressor("tree", n_members=100, random_state=0)
    on_cluster.fit(X_train_lazy, y_train_lazy)
    here = bagwise.BagRegressor("tree", n_members=100, random_state=0, backend="local")
    here.fit(X_train, y_train)
    same = np.array_equal(on_cluster.member_predictions(X_test), here.member_predictions(X_test))
    print(f"identical member predictions: {same}")
    print(f"identical in-bag counts: {np.array_equal(on_cluster.in_bag_, here.in_bag_)}")
    """),
    md("""
    ## Lazy member predictions

    On a dask `X`, `member_predictions` returns a dask array (members × points) chunked
    like the points. Nothing is computed until asked; the fitted model goes to each worker
    once, and each chunk is predicted where it lives.
    """),
    code("""
    members = on_cluster.member_predictions(X_test_lazy)
    print(f"shape {members.shape}, chunks along the points {members.chunks[1]}")
    members
    """),
    md("""
    ## Diagnosing without gathering the members

    `diagnose` (and every diagnostic it bundles) takes the lazy members as they are. Each
    chunk of points becomes a small state on its worker (sums over its points, or its
    per-point results); the states are merged on the workers in point order and only the
    merged state comes back. The in-bag counts could be a dask array chunked along the
    training rows too: their members × members Gram is then summed from per-chunk parts,
    in exact integers.
    """),
    code("""
    import warnings

    lazy_counts = da.from_array(on_cluster.in_bag_, chunks=(100, 500))
    # 100 members are too few for steady standard errors; both runs say so in one warning,
    # recorded here so the two can be compared.
    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        lazy_report = bagwise.diagnose(members, y_test, counts=lazy_counts)
        memory_report = bagwise.diagnose(here.member_predictions(X_test), y_test,
                                         counts=here.in_bag_)
    print(f"warnings: {len(said)}, the same text: {str(said[0].message) == str(said[1].message)}")
    print(said[0].message)
    lazy, memory = lazy_report.decomposition, memory_report.decomposition
    gap = abs(lazy.ensemble_loss - memory.ensemble_loss) / memory.ensemble_loss
    print(f"ensemble loss {lazy.ensemble_loss:.6f} on the cluster, {memory.ensemble_loss:.6f} "
          f"in memory (relative difference {gap:.1e})")
    print(f"same readings: {lazy_report.readings() == memory_report.readings()}")
    """),
    code("""
    lazy_report.decomposition
    """),
    md("""
    ## A member matrix on disk

    A matrix of member predictions too large for memory is best kept on disk: a `.npy`
    file (or a zarr array). Open it as a memory map; while a client is active, each worker
    reads its own chunks from the file, so neither this process nor any worker holds the
    whole matrix. (The workers must see the same file system: a shared disk, or one
    machine as here.)
    """),
    code("""
    import tempfile
    from pathlib import Path

    folder = Path(tempfile.mkdtemp())
    np.save(folder / "members.npy", here.member_predictions(X_test))
    on_disk = np.load(folder / "members.npy", mmap_mode="r")
    from_disk = bagwise.decompose(on_disk, y_test)
    print(f"ambiguity from the file {from_disk.ambiguity:.6f}, in memory {memory.ambiguity:.6f}")
    """),
    md("""
    ## What travels

    | call | to each worker | back, per chunk of points |
    |---|---|---|
    | `fit` | the training rows, once | the fitted members of its groups |
    | `member_predictions` | the fitted model, once | nothing until computed |
    | `decompose`, `size_curve`, `correlation`, `diversity` | — | O(members) to O(members²) numbers |
    | `out_of_bag` | — | O(members) sums and the chunk's out-of-bag predictions |
    | `prediction_variance`, `spread` | the count Gram, O(members²), once | the chunk's per-point estimates |
    | `prediction_interval` | the training side, O(members × rows), once | the chunk's intervals |

    The client ends up with the result objects, whose per-point arrays (standard errors,
    intervals, out-of-bag predictions) are one number per point.
    """),
    code("""
    client.close()
    cluster.close()
    """),
]

# -- 7. which members are redundant -----------------------------------------------------------
WHICH_MEMBERS = [
    md("""
    # Which members are redundant?

    A bag's members are exchangeable: drawn in any order, the ensemble of the first k members
    gets better slowly and reaches the full ensemble's error only near the end. Ordered
    aggregation looks for an order whose first few members already do as well as all of them,
    and pruning ships only those: a smaller model that predicts faster.

    This notebook orders the members of bagged trees on the vineyard yields by reduce-error
    (greedy forward selection, Margineantu & Dietterich 1997), using only the bag's own
    out-of-bag predictions, then prunes the bag and checks the pruned bag on test vines it
    never saw.
    """),
    VINEYARDS,
    code("""
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=1000, random_state=0)
    bag = bagwise.BagRegressor("tree", n_members=100, random_state=0).fit(X_train, y_train)
    order = bag.order_members()       # chosen on the out-of-bag predictions: no extra data
    order
    """),
    md("""
    `curve` is the error of the first k members on the out-of-bag predictions that chose the
    order: optimistic, since the order was fitted to them. `honest_curve` splits the training
    rows into two folds and measures each fold with the order the other fold chose; the
    sizes above are read from it. On test vines the order never saw:
    """),
    code("""
    from bagwise.plots import plot_member_order

    test = order.evaluate(bag.member_predictions(X_test), y_test)
    print(f"within 1% of all 100 members on the test vines: {test.members_within(0.01)} members "
          f"in this order, {test.members_within(0.01, 'random')} in a random order")
    plot_member_order(test, unit="kg")
    plt.show()
    """),
    md("""
    ## A smaller bag to ship

    `prune` keeps the first members of the order as a fitted bag: the same members, their
    in-bag counts, and everything a bag does (save, load, diagnose). `"smallest"` keeps the
    fewest members from which the honest out-of-bag error stays within 1% of the full bag's.
    """),
    code("""
    import time

    small = bag.prune("smallest", order=order)
    fifth = bag.prune(0.2, order=order)
    for name, model in (("all", bag), ("smallest", small), ("20%", fifth)):
        start = time.perf_counter()
        error = np.mean((model.predict(X_test) - y_test) ** 2)
        seconds = time.perf_counter() - start
        print(f"{name:>8}: {model.n_members:3d} members, test squared error {error:.4f} kg², "
              f"predicted in {seconds * 1000:.1f} ms")
    dropped = sorted(set(range(bag.n_members)) - set(small.member_indices_.tolist()))
    print(f"members dropped by 'smallest': {dropped}")
    """),
    md("""
    Regression bags gain less from ordering than classifiers: averaging already removes the
    members' variance smoothly, and an order chosen on noisy out-of-bag errors rarely beats
    a random one by much. The honest curve and the test vines above say whether it did
    here; when it does not, `"smallest"` keeps almost every member, which is the right
    answer rather than a failure.

    ## Classifiers

    For classifiers, Martínez-Muñoz, Hernández-Lobato & Suárez (2009) found subensembles of
    about 15-30% of the members matching or beating full bagging on most of their data sets.
    The same steps on the premium grade, with reduce-error and complementarity (Martínez-Muñoz
    & Suárez 2004):
    """),
    code("""
    grade = data["premium_grade"].astype(np.int64)
    X_train, X_test, g_train, g_test = train_test_split(X, grade, test_size=1000, random_state=0)
    forest = bagwise.BagClassifier("tree", n_members=100, random_state=0).fit(X_train, g_train)
    full_error = np.mean(forest.predict(X_test) != g_test)
    print(f"all 100 members: test error rate {full_error:.3f}")
    for method in ("reduce_error", "complementarity"):
        chosen = forest.order_members(method=method)
        fifth = forest.prune(0.2, order=chosen)
        test = chosen.evaluate(forest.member_predictions(X_test), g_test)
        print(f"{method:>15}: best 20 members {np.mean(fifth.predict(X_test) != g_test):.3f}; "
              f"within 1% of all on the test vines with {test.members_within(0.01)} members "
              f"(random order: {test.members_within(0.01, 'random')})")
    """),
]

NOTEBOOKS = {
    "01_does_bagging_help.ipynb": DOES_BAGGING_HELP,
    "02_how_many_members.ipynb": HOW_MANY_MEMBERS,
    "03_standard_errors.ipynb": STANDARD_ERRORS,
    "04_bag_your_own_estimator.ipynb": OWN_ESTIMATOR,
    "05_ensemble_fitted_elsewhere.ipynb": FITTED_ELSEWHERE,
    "06_more_than_one_machine.ipynb": MORE_THAN_ONE_MACHINE,
    "07_which_members_are_redundant.ipynb": WHICH_MEMBERS,
}


def build(name: str) -> nbformat.NotebookNode:
    """The notebook ``name`` with its cells and no outputs."""
    cells = [nbformat.from_dict(dict(cell)) for cell in NOTEBOOKS[name]]
    nb = new_notebook(cells=cells, metadata={
        "kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"},
        "language_info": {"name": "python"},
    })
    for number, cell in enumerate(nb.cells):
        cell["id"] = f"cell-{number:02d}"
    nbformat.validate(nb)
    return nb


def execute(nb: nbformat.NotebookNode, cwd: Path, timeout: float = 600) -> nbformat.NotebookNode:
    """Run every cell of ``nb`` top to bottom in the python3 kernel, working in ``cwd``."""
    from nbclient import NotebookClient

    client = NotebookClient(nb, timeout=timeout, kernel_name="python3", record_timing=False,
                            resources={"metadata": {"path": str(cwd)}})
    client.execute()
    return nb


def main(argv: list[str]) -> int:
    run = "--no-execute" not in argv
    prefixes = [a for a in argv if not a.startswith("--")]
    names = [n for n in NOTEBOOKS if not prefixes or any(n.startswith(p) for p in prefixes)]
    for name in names:
        nb = build(name)
        start = time.perf_counter()
        if run:
            execute(nb, HERE)
        nbformat.write(nb, HERE / name)
        print(f"{name}: {time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
