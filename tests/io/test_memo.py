"""pipeline.io.memo: results kept between runs are the computation's own, bit for bit."""

import json

import numpy as np

from pipeline.io import memo as memo_module
from pipeline.io.memo import Memo, inputs_key


def test_results_read_back_exactly_and_only_used_ones_kept(tmp_path):
    path = tmp_path / "m.json"
    values = (0.1 + 0.2, float("nan"), -0.0, 1e-310, float("inf"), 3, True)   # repr round trip: Python's float
    first = Memo(path)
    assert first.result("a", lambda: values) == values
    assert first.result("b", lambda: (np.float64(2.5), np.int64(7))) == (2.5, 7)
    first.save()
    second = Memo(path)
    got = second.result("a", lambda: (_ for _ in ()).throw(AssertionError("computed again")))
    assert got[0] == 0.1 + 0.2 and np.isnan(got[1]) and str(got[2]) == "-0.0" and got[3] == 1e-310
    assert got[4:] == (float("inf"), 3, True) and second.computed == 0
    second.save()                                              # "b" was not used: dropped
    assert set(json.loads(path.read_text())["entries"]) == {"a"}


def test_changed_code_or_unreadable_file_starts_empty(tmp_path, monkeypatch):
    path = tmp_path / "m.json"
    kept = Memo(path)
    kept.result("a", lambda: (1.0,))
    kept.save()
    import pipeline.io.provenance as provenance

    monkeypatch.setattr(provenance, "code_version", lambda: "another code")
    assert Memo(path).result("a", lambda: (2.0,)) == (2.0,)
    path.write_text("not json")
    fresh = Memo(path)
    assert fresh.result("a", lambda: (3.0,)) == (3.0,) and fresh.computed == 1
    assert Memo(None).result("a", lambda: (4.0,)) == (4.0,)           # no file: always computed


def test_inputs_key_tells_dtype_shape_and_exact_values_apart():
    a = np.zeros(2)
    assert inputs_key(a) == inputs_key(np.zeros(2))
    assert len({inputs_key(a), inputs_key(a.reshape(1, 2)), inputs_key(a.astype(np.float32)),
                inputs_key(np.array([0.0, 1e-300]))}) == 4
    assert inputs_key(0.1 + 0.2) != inputs_key(0.3)                # exact repr, not rounded
    assert inputs_key(np.float64(0.5)) == inputs_key(0.5)
    assert inputs_key(np.array(0.5)) != inputs_key(np.array([0.5]))         # a 0-d array is not a 1-element one
    assert inputs_key("x", 1.0) != inputs_key("x1", ".0") and memo_module.memo_path("o", "n").name == "n.json"
