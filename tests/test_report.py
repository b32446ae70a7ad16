"""The HTML report of a Diagnosis (`Diagnosis.to_html`) and the notebook display of every
result type: documents parsed with the standard library's html.parser, the key numbers as
`Diagnosis.summary` gives them, embedded PNG figures decoded, nothing fetched from the
network, the README's cautions at the foot, and the report without matplotlib."""

from __future__ import annotations

import base64
import html.parser
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from sklearn.base import BaseEstimator

import bagwise
from bagwise.report import CAUTIONS, format_number

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # the PNG file signature (PNG specification, 5.2)


class Page(html.parser.HTMLParser):
    """Collects the tags, their attributes and the text of a document; fails on tags that
    are closed without being opened."""

    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.tags, self.text, self.open = [], [], []
        self.feed(text)
        self.close()

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in self.VOID:
            self.open.append(tag)

    def handle_endtag(self, tag):
        assert self.open and self.open[-1] == tag, f"</{tag}> closes {self.open[-1:]}"
        self.open.pop()

    def handle_data(self, data):
        self.text.append(data)

    @property
    def words(self):
        return " ".join(" ".join(self.text).split())

    def count(self, tag):
        return sum(1 for t, _ in self.tags if t == tag)

    def images(self):
        return [attrs["src"] for t, attrs in self.tags if t == "img"]


def ensemble(members=200, n_train=80, n_test=150, seed=0):
    """Bagged means with member noise: member b predicts ``y + 0.3 + counts_b @ Z / n`` plus
    its own noise at the test points and, with its own Z, at the training rows."""
    rng = np.random.default_rng(seed)
    counts = bagwise.resample(n_train, members, rng=seed).counts
    y_test, y_train = rng.normal(size=n_test), rng.normal(size=n_train)
    test = (y_test + 0.3 + counts @ rng.normal(size=(n_train, n_test)) / n_train
            + 0.03 * rng.normal(size=(members, n_test)))
    train = (y_train + 0.3 + counts @ rng.normal(size=(n_train, n_train)) / n_train
             + 0.03 * rng.normal(size=(members, n_train)))
    return test, y_test, counts, train, y_train


@pytest.fixture(scope="module")
def diagnosis():
    test, y_test, counts, train, y_train = ensemble()
    return bagwise.diagnose(test, y_test, counts=counts, train_members=train, y_train=y_train,
                            reference=y_test + 0.5)


@pytest.fixture(scope="module")
def page(diagnosis):
    return diagnosis.to_html(title="Test report", unit="kg")


def test_report_parses_and_holds_the_key_numbers(diagnosis, page):
    parsed = Page(page)
    assert parsed.open == []
    words = parsed.words
    summary = diagnosis.summary()
    assert f"{summary['decomposition']['ensemble_loss']:.6g}" in words
    for section, numbers in summary.items():
        for quantity, value in numbers.items():
            assert format_number(value) in words, (section, quantity)
    for line in diagnosis.readings():
        assert " ".join(line.split()) in words
    # each section's own table is in the report
    for _, title, rows, reading in diagnosis._parts():
        assert title in words
        assert " ".join(reading.split()) in words
        for key, value in rows:
            assert f"{key} {value}" in words
    assert "Test report" in words
    assert parsed.tags[0][0] == "html" and ("title", {}) in parsed.tags


def test_report_embeds_every_figure_and_fetches_nothing(diagnosis, page):
    parsed = Page(page)
    images = parsed.images()
    # decomposition (2), size curve (1), correlation heatmap (1), prediction-interval
    # coverage (1), member order (1), between/within (2, only where its between part is
    # estimable); the standard errors have no figure without refitted ensembles to check
    # them against
    between = 2 if diagnosis.spread.pooled_status != "not estimable" else 0
    assert len(images) == 6 + between
    for src in images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1]).startswith(PNG_SIGNATURE)
    assert parsed.count("link") == 0 and parsed.count("script") == 0
    assert parsed.count("iframe") == 0 and parsed.count("object") == 0
    assert not re.search(r"https?://", page)
    assert "@import" not in page and "url(" not in page


def test_report_ends_with_the_readme_cautions(page):
    parsed = Page(page)
    assert " ".join(CAUTIONS.split()) in parsed.words
    assert page.index("Cautions") > page.rindex("<section")


def test_cautions_are_the_readme_section():
    readme = (Path(__file__).parents[1] / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Cautions", 1)[1].split("\n## ", 1)[0]
    assert " ".join(section.split()) == " ".join(CAUTIONS.split())


def test_to_html_writes_the_page(diagnosis, tmp_path):
    path = tmp_path / "report.html"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        page = diagnosis.to_html(path)
    assert path.read_text(encoding="utf-8") == page
    assert "bagwise diagnosis" in Page(page).words


def test_heatmap_left_out_beyond_300_members():
    test, y_test, counts, _, _ = ensemble(members=301, n_test=60)
    report = bagwise.diagnose(test, y_test, counts=counts)
    images = Page(report.to_html()).images()
    # decomposition (2), size curve (1), member order (1), between/within (2 where
    # estimable): no heatmap
    between = 2 if report.spread.pooled_status != "not estimable" else 0
    assert len(images) == 4 + between


def test_label_report_has_the_figures_that_apply():
    rng = np.random.default_rng(1)
    y = rng.integers(0, 3, size=300)
    members = np.where(rng.random((25, 300)) < 0.6, y, rng.integers(0, 3, size=(25, 300)))
    report = bagwise.diagnose(members, y)
    parsed = Page(report.to_html())
    # decomposition bars (no ambiguity identity for error rates), the size curve, the
    # kappa-error diagram of the member pairs and the member order
    assert len(parsed.images()) == 4
    assert "kappa-error diagram" in parsed.words
    assert f"{report.decomposition.ensemble_loss:.6g}" in parsed.words


def test_report_without_matplotlib_still_renders():
    code = (
        "import sys\n"
        "sys.modules['matplotlib'] = None\n"
        "import numpy as np, bagwise\n"
        "rng = np.random.default_rng(0)\n"
        "y = rng.normal(size=100)\n"
        "page = bagwise.diagnose(y + rng.normal(size=(10, 100)), y).to_html()\n"
        "print(page.count('<img'), 'pip install bagwise[plots]' in page, 'Cautions' in page)\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                            timeout=120, check=False)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == ["0", "True", "True"]


def test_report_rejects_a_title_that_is_not_text(diagnosis):
    with pytest.raises(TypeError, match="`title`"):
        diagnosis.to_html(title=3)


# -- notebook display of every result type --------------------------------------------------

def _two_classes(values):
    """Logistic class probabilities (n_members, n_points, 2) from member values."""
    return np.stack([1 / (1 + np.exp(values)), 1 / (1 + np.exp(-values))], axis=-1)


def _results():
    test, y_test, counts, train, y_train = ensemble(members=60, n_train=40, n_test=50)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # few members: the standard errors warn, as they should
        shared = np.random.default_rng(0).normal(size=(10, 1, 30))
        return {
            "Resample": bagwise.resample(40, 60, rng=0),
            "Decomposition": bagwise.decompose(test, y_test),
            "SizeCurve": bagwise.size_curve(test, y_test),
            "Correlation": bagwise.correlation(test, y_test),
            "OutOfBag": bagwise.out_of_bag(train, counts, y_train),
            "PredictionVariance": bagwise.prediction_variance(test, counts),
            "Spread": bagwise.spread(test, counts),
            "ReplicateSpread": bagwise.replicate_spread(
                shared + np.random.default_rng(1).normal(size=(10, 8, 30))),
            "Diagnosis": bagwise.diagnose(test, y_test, counts=counts),
            "Diversity": bagwise.diversity(
                np.random.default_rng(2).integers(0, 3, size=(6, 80)),
                np.random.default_rng(3).integers(0, 3, size=80)),
            "PredictionInterval": bagwise.prediction_interval(test, counts, train, y_train, level=0.8),
            "PredictionSet": bagwise.prediction_interval(
                _two_classes(test), counts, _two_classes(train),
                (y_train > np.median(y_train)).astype(int), level=0.8),
            "EnsembleArrays": _read_forest(),
            "Verdict": _linear_bag().verdict(),
            "MemberOrder": bagwise.order_members(test, y_test, orders=3),
            "LearnerComparison": bagwise.compare_learners(
                *_linear_rows(), ["linear", "tree"], n_members=10, random_state=0),
        }


def _linear_rows():
    rng = np.random.default_rng(5)
    X = rng.normal(size=(60, 2))
    return X, X @ [1.0, -1.0] + rng.normal(size=60)


def _linear_bag():
    X, y = _linear_rows()
    return bagwise.BagRegressor("linear", n_members=10, random_state=0).fit(X, y)


def _read_forest():
    from sklearn.ensemble import RandomForestClassifier

    rng = np.random.default_rng(4)
    X = rng.normal(size=(60, 3))
    y = np.where(X[:, 0] > 0, "yes", "no")
    forest = RandomForestClassifier(n_estimators=5, random_state=0).fit(X, y)
    return bagwise.read_ensemble(forest, X[:10], X_train=X, y_train=y)


def test_every_result_type_displays_a_compact_table_and_a_reading():
    results = _results()
    # every public class with a notebook display except the estimators (scikit-learn's own)
    assert set(results) == {name for name in bagwise.__all__
                            if hasattr(getattr(bagwise, name), "_repr_html_")
                            and not issubclass(getattr(bagwise, name), BaseEstimator)}
    for name, result in results.items():
        out = result._repr_html_()
        parsed = Page(out)
        assert parsed.open == [], name
        assert not out.startswith("<pre>"), name  # the table, not the fallback
        if name == "Diagnosis":
            # one table per section, and the members-needed table when there is a figure
            needed = result.members_needed()
            assert parsed.count("table") == len(result._parts()) + (len(needed) > 0)
            assert parsed.count("li") == len(result.readings())
            continue
        if name == "LearnerComparison":
            # one table row per learner under a header row, each with its verdict
            header, cells = result._cells()
            assert parsed.count("table") == 1 and parsed.count("tr") == len(cells) + 1
            for row in cells:
                assert " ".join(row) in parsed.words, row
            assert " ".join(result._reading().split()) in parsed.words
            continue
        assert parsed.count("table") == 1, name
        rows = result._rows()
        assert parsed.count("tr") == len(rows), name
        reading = result._reading()
        assert reading and "\n" not in reading, name
        assert " ".join(reading.split()) in parsed.words, name
        for key, value in rows:
            assert f"{key} {value}" in parsed.words, (name, key)


def test_display_of_a_broken_result_falls_back_and_never_raises():
    for name, result in _results().items():
        broken = type(result).__new__(type(result))  # no attributes at all
        out = broken._repr_html_()
        assert out.startswith("<pre>") and name in out, name
        Page(out)
        half = type(result).__new__(type(result))
        half.__dict__.update({k: None for k in vars(result)})  # every attribute None
        out = half._repr_html_()
        assert isinstance(out, str) and out, name
        Page(out)


def test_probability_report_draws_the_figures_that_apply():
    rng = np.random.default_rng(0)
    y = rng.integers(0, 3, size=120)
    probabilities = rng.dirichlet([1.0, 1.0, 1.0], size=(50, 120))
    counts = bagwise.resample(120, 50, rng=0).counts
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # 50 members: the standard errors warn, as they should
        report = bagwise.diagnose(probabilities, y, counts=counts)
    parsed = Page(report.to_html())
    assert report.decomposition.loss == "brier_score"
    assert f"{report.decomposition.ensemble_loss:.6g}" in parsed.words
    # decomposition (2), size curve (1), heatmap (1), kappa-error diagram (1), member order
    # (1); between/within has no figure for class probabilities (one split per class)
    assert len(parsed.images()) == 6


def test_report_of_a_fitted_bag_has_every_figure():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 3))
    y = X @ [1.0, -2.0, 0.5] + rng.normal(size=300)
    bag = bagwise.BagRegressor("linear", n_members=400, random_state=0).fit(X[:100], y[:100])
    report = bag.diagnose(X[100:], y[100:])
    parsed = Page(report.to_html())
    # as `diagnose` on the same arrays: decomposition (2), size curve (1),
    # prediction-interval coverage (1, from the bag's out-of-bag training predictions),
    # member order (1), between/within (2 where estimable); no heatmap for 400 members
    between = 2 if report.spread.pooled_status != "not estimable" else 0
    assert len(parsed.images()) == 5 + between
    assert f"{report.decomposition.ensemble_loss:.6g}" in parsed.words
