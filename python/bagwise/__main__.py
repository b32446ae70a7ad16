"""Command line: ``python -m bagwise demo`` and ``python -m bagwise report``."""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import re
import sys
import tempfile
import textwrap
import warnings

REPORT_HELP = """\
Diagnose a bagged ensemble from its member predictions saved as files, print the key
numbers, and write a self-contained HTML report (and, with --json, the key numbers as JSON).

Files: .npy, or .npz (its first array, or FILE.npz:NAME for the array NAME); the targets
may also be a .csv with one column and an optional header line.

What the files mean:
  --members/--targets        the members' predictions, (members, points) values,
                             (members, points, classes) probabilities or integer
                             (members, points) labels, and the targets at those points.
  --counts                   in-bag counts (members, n_train). With them the report adds
                             standard errors and the between/within split; when the counts
                             have as many columns as --members has points, --members are
                             taken to be predictions on the training rows and the report
                             adds the out-of-bag error.
  --test-members/--test-targets
                             predictions and targets on held-out points: then the test set
                             is diagnosed, and --members/--targets are the training rows;
                             --counts is then required (one column per training row) and
                             gives the out-of-bag error as well.
  --reference                predictions of one model fit on all the training data, at the
                             diagnosed points: the report says whether bagging helps.

Exit status 0 on success, 2 on any error (one line on stderr starting with "error:").
"""

_DIAGNOSE_NAMES = {"members", "y", "counts", "reference", "train_members", "y_train"}


class CommandError(Exception):
    """A user error of the command line: printed as one ``error:`` line, exit status 2."""


# -- reading files --------------------------------------------------------------------------

def _read_csv(path, option):
    with open(path, encoding="utf-8") as handle:
        lines = [line.strip() for line in handle]
    lines = [line for line in lines if line]
    if not lines:
        raise CommandError(f"{option}: {path} is empty")
    values = []
    for number, line in enumerate(lines, start=1):
        fields = re.split(r"[,;\t]", line)
        if len(fields) != 1:
            raise CommandError(f"{option}: {path} line {number}: expected one column, got "
                               f"{len(fields)}")
        values.append(fields[0].strip().strip('"'))
    try:
        float(values[0])
    except ValueError:
        values = values[1:]  # a header line
        if not values:
            raise CommandError(f"{option}: {path} has a header but no values") from None
    import numpy as np

    try:
        return np.array([int(v) for v in values], dtype=np.int64)
    except ValueError:
        pass
    try:
        return np.array([float(v) for v in values], dtype=np.float64)
    except ValueError as err:
        raise CommandError(f"{option}: {path}: not a number ({err})") from None


def load_array(spec, option, *, csv=False):
    """The array in file ``spec`` (``.npy``, ``.npz`` or ``.npz:name``; ``.csv`` when
    ``csv``), with a `CommandError` naming ``option`` for anything that goes wrong."""
    import numpy as np

    name = None
    match = re.fullmatch(r"(.*\.npz):([^/\\:]+)", spec, flags=re.IGNORECASE)
    path = spec
    if match and not os.path.exists(spec):
        path, name = match.group(1), match.group(2)
    if not os.path.exists(path):
        raise CommandError(f"{option}: no such file: {path}")
    if os.path.isdir(path):
        raise CommandError(f"{option}: {path} is a directory, not a file")
    suffix = os.path.splitext(path)[1].lower()
    allowed = ".npy, .npz or .csv" if csv else ".npy or .npz"
    if suffix not in (".npy", ".npz") and not (csv and suffix == ".csv"):
        raise CommandError(f"{option}: cannot read {path}: expected a {allowed} file, got "
                           f"'{suffix or 'no suffix'}'")
    try:
        if suffix == ".csv":
            return _read_csv(path, option)
        if suffix == ".npy":
            return np.load(path, mmap_mode="r", allow_pickle=False)
        with np.load(path, allow_pickle=False) as archive:
            if not archive.files:
                raise CommandError(f"{option}: {path} holds no arrays")
            if name is None:
                name = archive.files[0]
            elif name not in archive.files:
                raise CommandError(f"{option}: {path} has no array '{name}' (it has: "
                                   f"{', '.join(archive.files)})")
            return archive[name]
    except CommandError:
        raise
    except (OSError, ValueError, EOFError, UnicodeDecodeError) as err:
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise CommandError(f"{option}: cannot read {path}: {reason}") from None


def _numeric(array, option, *, integer=False):
    kind = array.dtype.kind
    if integer and (kind not in "iu"):
        raise CommandError(f"{option}: expected integers, got dtype {array.dtype}")
    if kind not in "fiu":
        raise CommandError(f"{option}: expected numbers, got dtype {array.dtype}")
    return array


def _inputs(args):
    """Read and check the files; the keyword arguments of `bagwise.diagnosis._diagnose` and
    the option each of its argument names stands for."""
    members = _numeric(load_array(args.members, "--members"), "--members")
    targets = _numeric(load_array(args.targets, "--targets", csv=True), "--targets")
    if members.ndim not in (2, 3):
        raise CommandError(f"--members: expected (members, points) or (members, points, "
                           f"classes), got shape {members.shape}")
    _pair(members, targets, "--members", "--targets")
    counts = reference = None
    if args.counts:
        counts = _numeric(load_array(args.counts, "--counts"), "--counts", integer=True)
        if counts.ndim != 2 or counts.shape[0] != members.shape[0]:
            raise CommandError(f"--counts: expected ({members.shape[0]}, n_train) (one row per "
                               f"member of --members), got shape {counts.shape}")
    if (args.test_members is None) != (args.test_targets is None):
        raise CommandError("--test-targets: give --test-members and --test-targets together")
    if args.test_members is not None:
        test = _numeric(load_array(args.test_members, "--test-members"), "--test-members")
        test_y = _numeric(load_array(args.test_targets, "--test-targets", csv=True),
                          "--test-targets")
        if test.ndim != members.ndim or test.shape[0] != members.shape[0]:
            raise CommandError(f"--test-members: expected {members.shape[0]} members shaped "
                               f"like --members {members.shape}, got shape {test.shape}")
        _pair(test, test_y, "--test-members", "--test-targets")
        if counts is None:
            raise CommandError("--counts: --test-members needs the in-bag counts the members "
                               "were fit with (the training rows of --members)")
        if counts.shape[1] != members.shape[1]:
            raise CommandError(f"--counts: expected {members.shape[1]} columns (one per training "
                               f"row of --members), got shape {counts.shape}")
        kwargs = dict(members=test, y=test_y, counts=counts, train_members=members,
                      train_y=targets, members_are_training=False)
        names = {"members": "--test-members", "y": "--test-targets",
                 "train_members": "--members", "y_train": "--targets"}
        points = test.shape[1]
    else:
        kwargs = dict(members=members, y=targets, counts=counts, train_members=None,
                      train_y=None, members_are_training=None)
        names = {"members": "--members", "y": "--targets"}
        points = members.shape[1]
    names.update(counts="--counts", reference="--reference")
    if args.reference:
        reference = _numeric(load_array(args.reference, "--reference", csv=True), "--reference")
        if reference.shape[:1] != (points,):
            raise CommandError(f"--reference: expected {points} predictions (one per diagnosed "
                               f"point), got shape {reference.shape}")
    kwargs["reference"] = reference
    return kwargs, names


def _pair(members, targets, members_option, targets_option):
    """Targets must hold one value per point of the members: a mismatch names both files
    and their shapes, since either may be the wrong one."""
    if targets.ndim != 1:
        raise CommandError(f"{targets_option}: expected one value per point (a 1-D array), "
                           f"got shape {targets.shape}")
    if targets.shape[0] != members.shape[1]:
        raise CommandError(f"{targets_option} / {members_option}: {targets.shape[0]} targets "
                           f"but {members.shape[1]} points (the second axis of "
                           f"{members_option}, shape {members.shape}); one of the two files "
                           "does not belong to the other")


def _first_bad(array):
    """The index of the first NaN or infinite entry of a float array, or None."""
    import numpy as np

    if array.dtype.kind != "f":
        return None
    bad = np.argwhere(~np.isfinite(np.asarray(array)))
    return None if bad.size == 0 else tuple(int(i) for i in bad[0])


def _where_bad(message, kwargs, names):
    """A NaN / infinity error of `diagnose` with the position of the first bad entry in the
    file named, the same wording whichever options the file came from."""
    if "NaN" not in message and "infinite" not in message:
        return message
    for name, option in names.items():
        array = kwargs.get({"y_train": "train_y"}.get(name, name))
        if option in message and array is not None and hasattr(array, "dtype"):
            index = _first_bad(array)
            if index is None:
                continue
            axes = ("member", "point", "class") if array.ndim > 1 else ("point",)
            if name in ("train_members", "y_train"):
                axes = ("member", "training row") if array.ndim > 1 else ("training row",)
            where = ", ".join(f"{axis} {i}" for axis, i in zip(axes, index))
            return f"{message} (first at {where}, counting from 0)"
    return message


def _writable(path, option):
    """Fail before any work when ``path`` cannot be written. An existing file is opened for
    appending (nothing changes); for a new one a uniquely named probe is made beside it, so two
    runs writing the same path at once neither see nor remove each other's file."""
    try:
        if os.path.exists(path):
            with open(path, "a", encoding="utf-8"):
                pass
        else:
            folder = os.path.dirname(os.path.abspath(path))
            with tempfile.NamedTemporaryFile(dir=folder, prefix=".bagwise-probe-"):
                pass
    except OSError as err:
        raise CommandError(f"{option}: cannot write {path}: {err.strerror or err}") from None


def _options(message, names):
    """Name the command-line options instead of the `diagnose` arguments in a message."""
    def swap(match):
        word = match.group(1)
        return names.get(word, match.group(0)) if word in _DIAGNOSE_NAMES else match.group(0)

    return re.sub(r"`([a-z_]+)`", swap, message)


# -- printing -------------------------------------------------------------------------------

def summary_table(diagnosis) -> str:
    """The key numbers of `Diagnosis.summary` (section by section), the members-needed
    table and the readings, as plain text."""
    from .report import summary_rows

    rows = summary_rows(diagnosis.summary())
    widths = [max(len(r[i]) for r in rows) for i in range(2)]
    lines, last = [], None
    for section, quantity, value in rows:
        label = section if section != last else ""
        lines.append(f"  {label:<{widths[0]}}  {quantity:<{widths[1]}}  {value}".rstrip())
        last = section
    head = (f"bagwise diagnosis ({diagnosis.kind}: {diagnosis.n_members:,} members x "
            f"{diagnosis.n_points:,} points)")
    needed = diagnosis._quiet_needed()
    table = ["", needed._text()] if len(needed) else []
    readings = [f"  - {line}" for line in diagnosis.readings()]
    return "\n".join([head, *lines, *table, "", "Readings", *readings])


@contextlib.contextmanager
def _steps(total, quiet):
    """A bar over the steps of the command (tqdm when installed and stderr is a terminal)."""
    bar = None
    if not quiet:
        try:
            from tqdm.auto import tqdm
        except ImportError:
            tqdm = None
        if tqdm is not None:
            bar = tqdm(total=total, unit="step", file=sys.stderr, disable=None, leave=False)

    started = []

    def step(description):
        """Mark the step before as done and show ``description`` as the one running."""
        if bar is not None:
            if started:
                bar.update(1)
            started.append(description)
            bar.set_description(description)

    try:
        yield step
        if bar is not None and started:
            bar.update(1)
    finally:
        if bar is not None:
            bar.close()


_shown: set[str] = set()


def _warn_plainly(message, category, filename, lineno, file=None, line=None):
    """Show a warning of the diagnosis as one ``warning:`` line, each text once."""
    text = "warning: " + " ".join(str(message).split())
    if text not in _shown:
        _shown.add(text)
        print(text, file=sys.stderr)


def report(args) -> int:
    from .diagnosis import _diagnose
    from .report import CAUTIONS

    _writable(args.out, "--out")
    if args.json:
        _writable(args.json, "--json")
    with _steps(4, args.quiet) as step:
        step("reading")
        kwargs, names = _inputs(args)
        step("diagnosing")
        try:
            with warnings.catch_warnings():
                warnings.showwarning = _warn_plainly
                diagnosis = _diagnose(seed=args.seed, n_jobs=None, **kwargs)
        except (ValueError, TypeError) as err:
            raise CommandError(_where_bad(_options(str(err), names), kwargs, names)) from None
        step("drawing the report")
        with warnings.catch_warnings():
            warnings.showwarning = _warn_plainly
            page = diagnosis.to_html(title=args.title, unit=args.unit)
        step("writing")
        _write(args.out, page, "--out")
        if args.json:
            text = json.dumps(diagnosis.summary(), indent=2, allow_nan=False)
            _write(args.json, text + "\n", "--json")
    print(summary_table(diagnosis))
    print("\n" + _in_sample_note(kwargs))
    print("\nCautions\n" + textwrap.fill(CAUTIONS, 100, initial_indent="  ",
                                         subsequent_indent="  "))
    print(f"\nreport written to {args.out}" + (f", summary to {args.json}" if args.json else ""))
    return 0


def _in_sample_note(kwargs) -> str:
    """What the diagnosed points are: held-out points, the training rows, or unknown."""
    counts, members = kwargs["counts"], kwargs["members"]
    if kwargs["train_members"] is not None:
        return ("Diagnosed points: the held-out points of --test-members; the out-of-bag "
                "error comes from the training rows of --members.")
    if counts is not None and counts.shape[1] == members.shape[1]:
        return ("Diagnosed points: the training rows (in-sample). The losses, size curve and "
                "standard errors describe the rows the members were fit on; only the "
                "out-of-bag error estimates the error on new data. Give --test-members and "
                "--test-targets to diagnose held-out points.")
    return ("Diagnosed points: the points of --members. If the members were fit on them, the "
            "losses are in-sample; give --counts so the out-of-bag error can say how the "
            "ensemble does on new data.")


def _write(path, text, option):
    try:
        with open(path, "w", encoding="utf-8") as handle:
            handle.write(text)
    except OSError as err:
        raise CommandError(f"{option}: cannot write {path}: {err.strerror or err}") from None


# -- entry point ----------------------------------------------------------------------------

def _parser():
    parser = argparse.ArgumentParser(prog="python -m bagwise", description="bagwise tools")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="run the pipeline on the bundled demo data")
    demo.add_argument("--data", help="path to vineyards.csv (default: the copy shipped in the package)")
    demo.add_argument("--members", type=int, default=100,
                      help="ensemble members in every section (default 100)")
    demo.add_argument("--seed", type=int, default=0, help="seed (default 0)")
    rep = commands.add_parser("report", help="diagnose member predictions saved as files",
                              description=REPORT_HELP,
                              formatter_class=argparse.RawDescriptionHelpFormatter)
    rep.add_argument("--members", required=True, metavar="FILE",
                     help="member predictions (members, points[, classes])")
    rep.add_argument("--targets", required=True, metavar="FILE",
                     help="targets at the points of --members (class indices for classifiers)")
    rep.add_argument("--counts", metavar="FILE", help="in-bag counts (members, n_train), integers")
    rep.add_argument("--test-members", metavar="FILE",
                     help="member predictions on held-out points (then --members are the "
                          "training rows)")
    rep.add_argument("--test-targets", metavar="FILE", help="targets at the held-out points")
    rep.add_argument("--reference", metavar="FILE",
                     help="one model's predictions at the diagnosed points")
    rep.add_argument("--out", required=True, metavar="FILE", help="where to write the HTML report")
    rep.add_argument("--json", metavar="FILE", help="also write the key numbers as JSON")
    rep.add_argument("--seed", type=int, default=0, help="seed of the size-curve member orders "
                                                         "(default 0)")
    rep.add_argument("--title", help="title of the report")
    rep.add_argument("--unit", help="unit of the targets for the figure labels, e.g. kg")
    rep.add_argument("--quiet", action="store_true", help="no progress bar")
    return parser


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    if args.command == "demo":
        from ._demo import run

        try:
            run(args.data, members=args.members, seed=args.seed, out=sys.stdout)
        except (FileNotFoundError, ValueError, TypeError) as err:
            print(f"error: {err}", file=sys.stderr)
            return 2
        return 0
    try:
        return report(args)
    except CommandError as err:
        print("error: " + " ".join(str(err).split()), file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
