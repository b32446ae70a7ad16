"""The bagwise file format: checksum, round trips, and rejection of truncated, corrupted,
foreign and wrong-version files."""

from __future__ import annotations

import base64
import json
import pickle
import struct
import zlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.tree import DecisionTreeRegressor

import bagwise
from bagwise import _core


def test_crc32_matches_zlib_and_the_catalogue():
    # CRC-32/ISO-HDLC check value 0xCBF43926 (Greg Cook's CRC catalogue) and zlib.crc32.
    assert _core.crc32(b"123456789") == 0xCBF43926
    rng = np.random.default_rng(0)
    for size in (0, 1, 7, 1000, 65537):
        data = rng.integers(0, 256, size=size, dtype=np.uint8).tobytes()
        assert _core.crc32(data) == zlib.crc32(data)


def _fitted():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(90, 3))
    y = x @ [1.0, 2.0, -1.0] + rng.normal(size=90)
    labels = np.where(x[:, 0] > 0, "up", "down")
    frame = pd.DataFrame(x, columns=["north", "east", "depth"])
    return {
        "linear": (bagwise.BagRegressor("linear", n_members=5, penalty=0.5, random_state=3).fit(x, y), x),
        "neighbors": (bagwise.BagRegressor("neighbors", n_members=4, neighbors=3).fit(x, y), x),
        "classes": (bagwise.BagClassifier("neighbors", n_members=4, stratify=True).fit(frame, labels),
                    frame),
        "int_classes": (bagwise.BagClassifier("neighbors", n_members=3, scheme="subsample",
                                                  fraction=0.7).fit(x, (x[:, 1] > 0) * 3 + 1), x),
        "tree": (bagwise.BagRegressor("tree", n_members=4, random_state=2).fit(x, y), x),
        "tree_classes": (bagwise.BagClassifier("tree", n_members=4, max_depth=3).fit(frame, labels),
                         frame),
    }


@pytest.mark.parametrize("name", ["linear", "neighbors", "classes", "int_classes", "tree",
                                  "tree_classes"])
def test_save_and_load_give_identical_predictions(name, tmp_path):
    bag, x = _fitted()[name]
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    back = bagwise.load(path)
    assert type(back) is type(bag)
    assert back.get_params() == bag.get_params()
    np.testing.assert_array_equal(back.member_predictions(x), bag.member_predictions(x))
    np.testing.assert_array_equal(back.in_bag_, bag.in_bag_)
    assert back.in_bag_.dtype == bag.in_bag_.dtype
    assert back.n_features_in_ == bag.n_features_in_ and back.seed_ == bag.seed_
    if hasattr(bag, "classes_"):
        np.testing.assert_array_equal(back.classes_, bag.classes_)
        assert back.classes_.dtype == bag.classes_.dtype
        np.testing.assert_array_equal(back.predict(x), bag.predict(x))
    if hasattr(bag, "feature_names_in_"):
        assert list(back.feature_names_in_) == list(bag.feature_names_in_)
    # The training rows are not stored: out-of-bag predictions need them again.
    with pytest.raises(ValueError, match="`X`"):
        back.out_of_bag_predictions()
    np.testing.assert_array_equal(back.out_of_bag_predictions(x), bag.out_of_bag_predictions())
    # A loaded ensemble pickles too, and a refit works as for any estimator.
    again = pickle.loads(pickle.dumps(back))
    np.testing.assert_array_equal(again.member_predictions(x), bag.member_predictions(x))


def test_header_layout(tmp_path):
    bag, _ = _fitted()["linear"]
    path = tmp_path / "bag.bagwise"
    bagwise.save(bag, path)
    data = path.read_bytes()
    assert data[:8] == b"\x89BAGWISE"
    assert struct.unpack("<I", data[8:12])[0] == 1
    assert data[13:13 + data[12]] == b"linear"
    # The trailing 4 bytes are the CRC-32 of everything before them (zlib.crc32).
    assert struct.unpack("<I", data[-4:])[0] == zlib.crc32(data[:-4])
    kind, text, payload = _core.unpack_container(data)
    meta = json.loads(text)
    assert kind == "linear" and meta["estimator"] == "BagRegressor"
    assert meta["params"]["penalty"] == 0.5 and meta["n_features_in"] == 3


def test_damaged_files_are_rejected(tmp_path):
    bag, _ = _fitted()["classes"]
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    data = path.read_bytes()
    bad = tmp_path / "bad.bagwise"
    rng = np.random.default_rng(2)
    # Every single flipped byte is caught (a CRC detects all single-byte errors).
    for at in sorted(set(rng.integers(0, len(data), size=60).tolist()) | {0, 8, 12, len(data) - 1}):
        flipped = bytearray(data)
        flipped[at] ^= 0x5A
        bad.write_bytes(bytes(flipped))
        with pytest.raises(ValueError, match="`path`"):
            bagwise.load(bad)
    for cut in (0, 4, 11, 40, len(data) // 2, len(data) - 1):
        bad.write_bytes(data[:cut])
        with pytest.raises(ValueError, match="not a bagwise file|truncated|corrupted"):
            bagwise.load(bad)
    bad.write_bytes(data + b"\0")
    with pytest.raises(ValueError, match="corrupted|truncated"):
        bagwise.load(bad)


def test_wrong_version_and_foreign_files(tmp_path):
    bag, _ = _fitted()["linear"]
    data = bytearray(_core.pack_container("linear", "{}", b""))
    data[8:12] = struct.pack("<I", 7)
    path = tmp_path / "f.bagwise"
    path.write_bytes(bytes(data))
    with pytest.raises(ValueError, match="format version 7"):
        bagwise.load(path)
    path.write_bytes(pickle.dumps(bag))
    with pytest.raises(ValueError, match="not a bagwise file"):
        bagwise.load(path)
    path.write_text("north,east\n1,2\n")
    with pytest.raises(ValueError, match="not a bagwise file"):
        bagwise.load(path)


def test_valid_checksum_with_bad_contents_is_still_rejected(tmp_path):
    bag, x = _fitted()["linear"]
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    kind, text, payload = _core.unpack_container(path.read_bytes())
    cases = [
        (kind, text, payload[:-3]),  # payload cut short
        ("neighbors", text, payload),  # kind tag does not match the payload
        ("forest", text, payload),  # unknown kind
        (kind, "not json", payload),
        (kind, json.dumps({**json.loads(text), "n_features_in": 4}), payload),
        (kind, json.dumps({**json.loads(text), "estimator": "os.system"}), payload),
        (kind, json.dumps({**json.loads(text), "params": {"shell": True}}), payload),
    ]
    for case in cases:
        path.write_bytes(_core.pack_container(*case))
        with pytest.raises(ValueError, match="`path`"):
            bagwise.load(path)


def test_wrapped_estimators_can_only_be_pickled(tmp_path):
    rng = np.random.default_rng(0)
    x, y = rng.normal(size=(40, 2)), rng.normal(size=40)
    bag = bagwise.BagRegressor(DecisionTreeRegressor(), n_members=3).fit(x, y)
    with pytest.raises(TypeError, match="pickle"):
        bag.save(tmp_path / "x.bagwise")
    assert not (tmp_path / "x.bagwise").exists()
    with pytest.raises(TypeError, match="`estimator`"):
        bagwise.save(DecisionTreeRegressor().fit(x, y), tmp_path / "y.bagwise")
    unfitted = bagwise.BagRegressor("linear")
    with pytest.raises(Exception, match="not fitted"):
        unfitted.save(tmp_path / "z.bagwise")


def test_files_with_the_former_estimator_and_parameter_names_still_load(tmp_path):
    # Files written before the estimators took the glossary names (RegressionBag,
    # members=, seed=) load as the same ensemble.
    bag, x = _fitted()["linear"]
    path = tmp_path / "new.bagwise"
    bag.save(path)
    kind, text, payload = _core.unpack_container(path.read_bytes())
    meta = json.loads(text)
    assert meta["estimator"] == "BagRegressor"
    meta["estimator"] = "RegressionBag"
    params = meta["params"]
    params["members"], params["seed"] = params.pop("n_members"), params.pop("random_state")
    old = tmp_path / "old.bagwise"
    old.write_bytes(_core.pack_container(kind, json.dumps(meta), payload))
    back = bagwise.load(old)
    assert type(back) is bagwise.BagRegressor and back.get_params() == bag.get_params()
    assert back.seed_ == bag.seed_ == 3
    np.testing.assert_array_equal(back.member_predictions(x), bag.member_predictions(x))


def test_paths_that_are_not_model_files_name_the_argument(tmp_path):
    # Empty, missing, a directory, a truncated header: each a clear error naming `path`.
    empty = tmp_path / "empty.bagwise"
    empty.write_bytes(b"")
    with pytest.raises(ValueError, match=r"^`path`: .*empty"):
        bagwise.load(empty)
    with pytest.raises(FileNotFoundError, match=r"^`path`: .*no such file"):
        bagwise.load(tmp_path / "missing.bagwise")
    with pytest.raises(IsADirectoryError, match=r"^`path`: .*directory"):
        bagwise.load(tmp_path)
    with pytest.raises(TypeError, match=r"^`path`"):
        bagwise.load(3.5)
    header = tmp_path / "header.bagwise"
    header.write_bytes(b"\x89BAGWISE\x01\x00\x00")
    with pytest.raises(ValueError, match=r"^`path`: .*truncated"):
        bagwise.load(header)


def test_wrong_kind_and_corrupt_metadata_are_refused_with_the_argument(tmp_path):
    # Valid checksums around bad contents: a payload of another learner, and metadata
    # edited field by field (missing keys, wrong types, shapes that disagree). Each edit
    # is refused with a ValueError naming `path`, never another exception.
    bag, _ = _fitted()["classes"]
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    kind, text, payload = _core.unpack_container(path.read_bytes())
    linear_kind, _, linear_payload = _core.unpack_container(
        _core.pack_container("linear", "{}", _fitted()["linear"][0]._model.to_bytes()))
    meta = json.loads(text)
    edits = [("tree", text, payload), (kind, text, linear_payload), (kind, "[]", payload),
             (kind, "null", payload), (kind, "", payload), (kind, "\"text\"", payload)]
    values = [None, 0, -1, 2**70, 1.5, "x", [], {}, [[1]], {"dtype": "<f8"}]
    for key in meta:
        reduced = {k: v for k, v in meta.items() if k != key}
        edits.append((kind, json.dumps(reduced), payload))
        for value in values:
            if value != meta[key]:
                edits.append((kind, json.dumps({**meta, key: value}), payload))
    for field in ("dtype", "shape", "zlib"):
        for value in values:
            in_bag = {**meta["in_bag"], field: value}
            edits.append((kind, json.dumps({**meta, "in_bag": in_bag}), payload))
    for field in ("dtype", "values"):
        for value in values:
            classes = {**meta["classes"], field: value}
            edits.append((kind, json.dumps({**meta, "classes": classes}), payload))
    refused = 0
    for edit in edits:
        path.write_bytes(_core.pack_container(*edit))
        try:
            back = bagwise.load(path)
        except ValueError as err:
            assert str(err).startswith("`path`: "), (edit[1][:200], err)
            refused += 1
        else:
            # An edit that still loads must give a working estimator.
            points = np.zeros((2, back.n_features_in_))
            if hasattr(back, "feature_names_in_"):
                points = pd.DataFrame(points, columns=list(back.feature_names_in_))
            back.predict(points)
    assert refused >= len(edits) - 20, (refused, len(edits))


def _stream_states():
    """Core states of every stream after one chunk, as `pickle` stores them."""
    rng = np.random.default_rng(4)
    members, y = rng.normal(size=(4, 9)), rng.normal(size=9)
    labels, truth = rng.integers(3, size=(4, 9)), rng.integers(3, size=9)
    counts = bagwise.resample(9, 4, rng=1).counts
    streams = {
        "decompose": bagwise.decompose_stream().update(members, y),
        "size_curve": bagwise.size_curve_stream(orders=3).update(members, y),
        "correlation": bagwise.correlation_stream(matrix=True).update(members, y),
        "diversity": bagwise.diversity_stream(n_classes=3).update(labels, truth),
        "out_of_bag": bagwise.out_of_bag_stream().update(members, counts, y),
        "replicate_spread": bagwise.replicate_spread_stream().update(
            members.reshape(2, 2, 9), y),
        "count_gram": bagwise.count_gram_stream(jackknife=True).update(counts),
    }
    return {name: getattr(stream, "_core", None) or stream._state
            for name, stream in streams.items()}


@pytest.mark.parametrize("name", sorted(_stream_states()))
def test_corrupt_stream_states_are_refused_or_finish_without_a_panic(name):
    # Pickled streams restore through `from_bytes`: every edit of the stored bytes (each
    # byte set to 0x00, 0x01, 0x7F, 0x80, 0xFF, a huge varint inserted, truncation at every
    # length) is refused with a ValueError naming `data`/`state`, or restores a state whose
    # result and self-merge raise at most a ValueError; a Rust panic (PanicException, not an
    # Exception) fails the test.
    state = _stream_states()[name]
    cls = type(state)
    data = state.to_bytes()
    assert cls.from_bytes(data).to_bytes() == data
    edits = [data[:cut] for cut in range(len(data))]
    for at in range(len(data)):
        for byte in (0x00, 0x01, 0x7F, 0x80, 0xFF):
            edits.append(data[:at] + bytes([byte]) + data[at + 1:])
        edits.append(data[:at] + b"\xff" * 9 + b"\x7f" + data[at:])
    refused = 0
    for edit in edits:
        try:
            restored = cls.from_bytes(edit)
        except ValueError as err:
            assert str(err).startswith(("`data`", "`state`")), err
            refused += 1
            continue
        for method in ("result", "finish", "losses"):
            if hasattr(restored, method):
                try:
                    getattr(restored, method)()
                except (ValueError, TypeError):
                    pass
        try:
            restored.merge(cls.from_bytes(edit))
        except ValueError:
            pass
    assert refused > 0


DATA = Path(__file__).parent / "data"


@pytest.mark.parametrize("name", ["tree_v1_regression", "tree_v1_classification"])
def test_tree_files_of_the_previous_format_still_load(name, tmp_path):
    # Written with tree format 1 and its in-bag counts uncompressed by the version at commit
    # 2b202dc, with the predictions it made (tests/data/make_tree_v1_files.py).
    path = DATA / f"{name}.bagwise"
    _, _, payload = _core.unpack_container(path.read_bytes())
    assert payload[:8] == b"bgwtree\x01"
    points = np.load(DATA / "tree_v1_points.npy")
    members = np.load(DATA / f"{name}_members.npy")
    predicted = np.load(DATA / f"{name}_predicted.npy")
    back = bagwise.load(path)

    def check(bag):
        np.testing.assert_array_equal(bag.member_predictions(points), members)
        proba = bag.predict_proba(points) if hasattr(bag, "classes_") else bag.predict(points)
        np.testing.assert_array_equal(proba, predicted)

    check(back)
    # Saved again, it is written in the current format and predicts the same.
    again = tmp_path / "again.bagwise"
    back.save(again)
    _, text, payload = _core.unpack_container(again.read_bytes())
    assert payload[:8] == b"bgwtree\x02" and "zlib" in json.loads(text)["in_bag"]
    check(bagwise.load(again))
    assert again.stat().st_size < path.stat().st_size


def test_pack_model_refuses_what_is_not_a_native_ensemble():
    with pytest.raises(TypeError, match="^`model`: .*got bytes"):
        _core.pack_model("tree", "{}", b"trees")
    bag, _ = _fitted()["tree"]
    with pytest.raises(ValueError, match="^`kind`"):
        _core.pack_model("", "{}", bag._model)
    # The same bytes as the container packed around the model's own bytes.
    assert (_core.pack_model("tree", "{}", bag._model)
            == _core.pack_container("tree", "{}", bag._model.to_bytes()))


def test_compressed_in_bag_counts_must_inflate_to_their_shape(tmp_path):
    bag, _ = _fitted()["tree"]
    path = tmp_path / "bag.bagwise"
    bag.save(path)
    kind, text, payload = _core.unpack_container(path.read_bytes())
    meta = json.loads(text)
    rows = bag.in_bag_.shape[1]
    bomb = base64.b64encode(zlib.compress(bytes(10**7))).decode("ascii")
    edits = [
        {**meta["in_bag"], "shape": [4, rows - 1]},  # holds more than its shape
        {**meta["in_bag"], "shape": [4, rows + 1]},  # holds less
        {**meta["in_bag"], "shape": [0, 0], "zlib": bomb},  # empty shape, large stream
        {**meta["in_bag"], "zlib": bomb},
        {**meta["in_bag"], "zlib": meta["in_bag"]["zlib"][:-8]},  # cut short
        {**meta["in_bag"], "zlib": base64.b64encode(b"not zlib").decode("ascii")},
        {**meta["in_bag"], "shape": [4, True]},
    ]
    for in_bag in edits:
        path.write_bytes(_core.pack_container(kind, json.dumps({**meta, "in_bag": in_bag}),
                                              payload))
        with pytest.raises(ValueError, match=r"^`path`: .*: inconsistent contents"):
            bagwise.load(path)
