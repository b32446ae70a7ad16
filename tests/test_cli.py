"""`python -m bagwise report`: round trips on .npy/.npz/.csv files written here, run in a
subprocess; the JSON summary against `Diagnosis.summary` computed in the test; one-line
errors and exit status 2 for bad input."""

from __future__ import annotations

import io
import json
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import bagwise
from bagwise.report import format_number


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "bagwise", *map(str, args)], capture_output=True,
                          text=True, timeout=300, check=False, cwd=cwd)


def ensemble(members=200, n_train=60, n_test=90, seed=0):
    """Bagged means: member b predicts ``y + 0.3 + counts_b @ Z / n_train`` at every point."""
    rng = np.random.default_rng(seed)
    counts = bagwise.resample(n_train, members, rng=seed).counts
    y_test, y_train = rng.normal(size=n_test), rng.normal(size=n_train)
    test = y_test + 0.3 + counts @ rng.normal(size=(n_train, n_test)) / n_train
    train = y_train + 0.3 + counts @ rng.normal(size=(n_train, n_train)) / n_train
    return test, y_test, counts, train, y_train


@pytest.fixture
def files(tmp_path):
    test, y_test, counts, train, y_train = ensemble()
    np.save(tmp_path / "train.npy", train)
    np.save(tmp_path / "y_train.npy", y_train)
    np.save(tmp_path / "counts.npy", counts)
    np.savez(tmp_path / "test.npz", predictions=test, other=np.zeros(3))
    (tmp_path / "y_test.csv").write_text("yield\n" + "\n".join(repr(float(v)) for v in y_test) + "\n")
    return tmp_path, (test, y_test, counts, train, y_train)


def test_round_trip_with_a_test_set(files):
    path, (test, y_test, counts, train, y_train) = files
    result = run("report", "--members", path / "train.npy", "--targets", path / "y_train.npy",
                 "--counts", path / "counts.npy", "--test-members", path / "test.npz",
                 "--test-targets", path / "y_test.csv", "--out", path / "report.html",
                 "--json", path / "summary.json", "--seed", 4)
    assert result.returncode == 0, result.stderr
    expected = bagwise.diagnose(test, y_test, counts=counts, train_members=train,
                                y_train=y_train, rng=4)
    summary = expected.summary()
    assert format_number(summary["decomposition"]["ensemble_loss"]) in result.stdout
    assert format_number(summary["out_of_bag"]["ensemble_loss"]) in result.stdout
    assert json.loads((path / "summary.json").read_text()) == summary
    page = (path / "report.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and "data:image/png;base64," in page
    assert result.stderr == ""


def test_training_rows_alone_give_the_out_of_bag_error(files):
    path, (_, _, counts, train, y_train) = files
    np.savez(path / "bag.npz", counts=counts, train=train)
    result = run("report", "--members", f"{path / 'bag.npz'}:train", "--targets",
                 path / "y_train.npy", "--counts", path / "bag.npz", "--out", path / "r.html",
                 "--json", path / "s.json", "--quiet")
    assert result.returncode == 0, result.stderr
    # counts with as many columns as points: the members are the training-row predictions
    expected = bagwise.diagnose(train, y_train, counts=counts).summary()
    assert "out_of_bag" in expected
    assert json.loads((path / "s.json").read_text()) == expected
    assert format_number(expected["out_of_bag"]["ensemble_loss"]) in result.stdout


def test_reference_and_csv_without_header(tmp_path):
    test, y_test, _, _, _ = ensemble()
    np.save(tmp_path / "m.npy", test.astype(np.float32))
    (tmp_path / "y.csv").write_text("\n".join(repr(float(v)) for v in y_test))
    np.save(tmp_path / "ref.npy", y_test + 1.0)
    result = run("report", "--members", tmp_path / "m.npy", "--targets", tmp_path / "y.csv",
                 "--reference", tmp_path / "ref.npy", "--out", tmp_path / "r.html",
                 "--json", tmp_path / "s.json")
    assert result.returncode == 0, result.stderr
    expected = bagwise.diagnose(test.astype(np.float32), y_test, reference=y_test + 1.0)
    assert json.loads((tmp_path / "s.json").read_text()) == expected.summary()
    assert expected.verdict() in result.stdout


def test_help_explains_what_the_files_mean():
    result = run("report", "--help")
    assert result.returncode == 0
    text = " ".join(result.stdout.split())
    assert "--test-members" in text and "the test set is diagnosed" in text
    assert "training rows" in text and "Exit status 0 on success, 2 on any error" in text


def bad_inputs(path):
    test, y_test, counts, train, y_train = ensemble(members=20, n_train=30, n_test=40)
    np.save(path / "m.npy", test)
    np.save(path / "y.npy", y_test)
    np.save(path / "short.npy", y_test[:-1])
    np.save(path / "text.npy", np.array(["a", "b", "c"] * 40).reshape(3, 40))
    np.save(path / "objects.npy", np.array([{"a": 1}] * 40, dtype=object), allow_pickle=True)
    np.save(path / "floats.npy", counts.astype(np.float64))
    np.save(path / "counts.npy", counts)
    np.save(path / "train.npy", train)
    (path / "m.txt").write_text("1 2 3\n")
    (path / "garbage.npy").write_bytes(b"not an array")
    (path / "two.csv").write_text("a,b\n1,2\n")
    np.savez(path / "a.npz", first=test)
    base = ["--out", path / "r.html"]
    m, y = ["--members", path / "m.npy"], ["--targets", path / "y.npy"]
    return {
        "missing file": (["--members", path / "nope.npy", *y, *base], "--members: no such file"),
        "shape mismatch": ([*m, "--targets", path / "short.npy", *base],
                           "--targets / --members: 39 targets but 40 points"),
        "string array": (["--members", path / "text.npy", *y, *base], "--members: expected numbers"),
        "object array": (["--members", path / "objects.npy", *y, *base], "--members: cannot read"),
        "txt file": (["--members", path / "m.txt", *y, *base], "--members: cannot read"),
        "not an npy file": (["--members", path / "garbage.npy", *y, *base],
                            "--members: cannot read"),
        "float counts": ([*m, *y, "--counts", path / "floats.npy", *base],
                         "--counts: expected integers"),
        "two csv columns": ([*m, "--targets", path / "two.csv", *base],
                            "--targets: " + str(path / "two.csv") + " line 1: expected one column"),
        "no such npz array": (["--members", f"{path / 'a.npz'}:second", *y, *base],
                              "--members: " + str(path / "a.npz") + " has no array 'second'"),
        "test set without counts": ([*m, *y, "--test-members", path / "m.npy", "--test-targets",
                                     path / "y.npy", *base], "--counts: --test-members needs"),
        "test targets alone": ([*m, *y, "--test-targets", path / "y.npy", *base],
                               "--test-targets: give --test-members and --test-targets"),
        "targets of another length": (["--members", path / "train.npy", "--targets",
                                       path / "short.npy", *base],
                                      "--targets / --members: 39 targets but 30 points"),
        "unwritable output": ([*m, *y, "--out", path / "missing-dir" / "r.html"],
                              "--out: cannot write"),
        # the output is checked before any file is read
        "unwritable output, missing input": (["--members", path / "nope.npy", *y, "--out",
                                              path / "missing-dir" / "r.html"],
                                             "--out: cannot write"),
    }


def test_bad_input_gives_one_error_line_and_status_2(tmp_path):
    cases = bad_inputs(tmp_path)
    with ThreadPoolExecutor(max_workers=4) as pool:  # independent processes, run together
        results = dict(zip(cases, pool.map(lambda case: run("report", *case[0]), cases.values())))
    for name, (_, start) in cases.items():
        result = results[name]
        assert result.returncode == 2, (name, result.stderr)
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1, (name, result.stderr)
        assert lines[0].startswith("error: " + start), (name, lines[0])
        assert result.stdout == "", name
        assert not (tmp_path / "r.html").exists(), name


def test_output_check_is_safe_when_runs_share_an_output(tmp_path):
    # Runs sharing --out check it at the same moment: none may remove a file another made, or
    # leave one behind (an earlier check created and removed the output itself: 91 errors in
    # 2,400 checks on 8 threads here)
    from bagwise.__main__ import _writable

    path = tmp_path / "r.html"

    def check(_):
        failures = 0
        for _ in range(300):
            try:
                _writable(str(path), "--out")
            except Exception:  # noqa: BLE001 - any failure counts
                failures += 1
        return failures

    with ThreadPoolExecutor(max_workers=8) as pool:
        assert sum(pool.map(check, range(8))) == 0
    assert list(tmp_path.iterdir()) == []
    path.write_text("kept")
    _writable(str(path), "--out")  # an existing output is checked without being changed
    assert path.read_text() == "kept"


def test_diagnose_errors_name_the_options(tmp_path):
    # labels out of range for probability members: found by `diagnose`, reported by option
    rng = np.random.default_rng(0)
    p = rng.dirichlet([1.0, 1.0], size=(10, 30))
    np.save(tmp_path / "p.npy", p)
    np.save(tmp_path / "y.npy", np.full(30, 5))
    result = run("report", "--members", tmp_path / "p.npy", "--targets", tmp_path / "y.npy",
                 "--out", tmp_path / "r.html")
    assert result.returncode == 2
    assert result.stderr.strip() == "error: --targets: label 5 is outside 0..1"


def test_nan_errors_name_the_file_and_the_entry_the_same_way(tmp_path):
    test, y_test, counts, train, y_train = ensemble(members=20, n_train=30, n_test=40)
    bad = test.copy()
    bad[3, 17] = np.nan
    np.save(tmp_path / "bad.npy", bad)
    np.save(tmp_path / "y.npy", y_test)
    np.save(tmp_path / "train.npy", train)
    np.save(tmp_path / "y_train.npy", y_train)
    np.save(tmp_path / "counts.npy", counts)
    alone = run("report", "--members", tmp_path / "bad.npy", "--targets", tmp_path / "y.npy",
                "--out", tmp_path / "r.html")
    held_out = run("report", "--members", tmp_path / "train.npy", "--targets",
                   tmp_path / "y_train.npy", "--counts", tmp_path / "counts.npy",
                   "--test-members", tmp_path / "bad.npy", "--test-targets", tmp_path / "y.npy",
                   "--out", tmp_path / "r.html")
    for result, option in ((alone, "--members"), (held_out, "--test-members")):
        assert result.returncode == 2
        line = result.stderr.strip()
        assert line.startswith(f"error: {option}: contains NaN"), line
        assert line.endswith("(first at member 3, point 17, counting from 0)"), line
    # the same fault reads the same whichever option carried the file
    assert (alone.stderr.replace("--members", "X")
            == held_out.stderr.replace("--test-members", "X"))


def test_the_output_says_what_was_diagnosed_and_prints_the_cautions(tmp_path):
    from bagwise.report import CAUTIONS

    _, _, counts, train, y_train = ensemble(members=20, n_train=30, n_test=40)
    np.save(tmp_path / "train.npy", train)
    np.save(tmp_path / "y_train.npy", y_train)
    np.save(tmp_path / "counts.npy", counts)
    result = run("report", "--members", tmp_path / "train.npy", "--targets",
                 tmp_path / "y_train.npy", "--counts", tmp_path / "counts.npy", "--out",
                 tmp_path / "r.html", "--quiet")
    assert result.returncode == 0, result.stderr
    text = " ".join(result.stdout.split())
    assert "Diagnosed points: the training rows (in-sample)" in text
    assert " ".join(CAUTIONS.split()) in text


def test_usage_errors_exit_with_status_2(tmp_path):
    result = run("report", "--members", tmp_path / "m.npy")
    assert result.returncode == 2
    assert "--targets" in result.stderr and "required" in result.stderr


def test_warnings_of_the_diagnosis_are_one_line_each(tmp_path):
    test, y_test, counts, _, _ = ensemble(members=12, n_train=60, n_test=40)
    np.save(tmp_path / "m.npy", test)
    np.save(tmp_path / "y.npy", y_test)
    np.save(tmp_path / "c.npy", counts)
    result = run("report", "--members", tmp_path / "m.npy", "--targets", tmp_path / "y.npy",
                 "--counts", tmp_path / "c.npy", "--out", tmp_path / "r.html")
    assert result.returncode == 0, result.stderr
    lines = result.stderr.strip().splitlines()
    # 12 members are too few for steady standard errors (see
    # bagwise.prediction_variance): the warning reaches the user as a plain line
    assert lines and all(line.startswith("warning: ") for line in lines)
    assert any("not estimable with 12 members" in line for line in lines)
    assert len(set(lines)) == len(lines)  # each warning once
    assert (tmp_path / "r.html").exists()


class Terminal(io.StringIO):
    def isatty(self):
        return True


@pytest.mark.parametrize(("stream", "quiet", "shown"), [(Terminal, False, True),
                                                         (Terminal, True, False),
                                                         (io.StringIO, False, False)])
def test_progress_bar_on_a_terminal_only(monkeypatch, stream, quiet, shown):
    from bagwise.__main__ import _steps

    err = stream()
    monkeypatch.setattr(sys, "stderr", err)
    with _steps(3, quiet) as step:
        step("reading")
        assert ("reading:   0%" in err.getvalue()) is shown  # the step running, none done
        step("diagnosing")
        step("writing")
        assert ("writing:  67%" in err.getvalue()) is shown
    # the bar is cleared when the command ends, so the printed table starts on a clean line
    assert err.getvalue().endswith("\r") is shown
    if not shown:
        assert err.getvalue() == ""
