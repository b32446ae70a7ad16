"""The bagwise file format: checksum, round trips, and rejection of truncated, corrupted,
foreign and wrong-version files."""

from __future__ import annotations

import json
import pickle
import struct
import zlib

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
    }


@pytest.mark.parametrize("name", ["linear", "neighbors", "classes", "int_classes"])
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
