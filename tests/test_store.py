"""Result store: stable keys, atomic writes, tidy table, selectors."""

import csv
import json
import os

import pytest

from lowfold.errors import LowfoldError, ModelError
from lowfold.scans.select import axis_value, scalar
from lowfold.scans.store import ResultStore, load_results, point_key, write_json_atomic
from lowfold.scans.table import table_rows, to_dataframe, write_csv


def _record(key, *, task="spectrum", status="ok", result=None, error=None, U=8.0, size=(4,)):
    return {
        "format": 1, "key": key, "status": status, "task": task, "options": {},
        "parameters": {"t": 1.0, "U": U}, "scanned": ["U"], "values": {"U": U, "size": list(size)},
        "size": list(size), "boundary": "open", "sector": {"particles": 4, "sz": 0.0},
        "n_sites": size[0], "model": {"path": "m.toml", "sha256": "0" * 64, "title": "dots"},
        "lowfold_version": "0.1.0", "timing": None, "result": result, "error": error,
    }


DERIVE = {
    "order": 4,
    "manifold": {"dimension": 4, "energy": 0.0, "gap": 8.0, "readout": "spin-1/2"},
    "terms": [{"operator": "Z0 Z1", "coefficient": 0.12, "orders": {"2": 0.125, "4": -0.005}}],
    "couplings": [
        {"kind": "exchange", "sites": [0, 1], "value": 0.49, "orders": {"2": 0.5, "4": -0.01}},
        {"kind": "field", "sites": [1], "value": [0.0, 0.0, 0.2], "orders": {"2": [0.0, 0.0, 0.2]}},
    ],
    "check": {"exact": [-1.0, -0.5], "by_order": {"2": {"max_abs_error": 1e-2},
                                                   "4": {"max_abs_error": 1e-4}}},
    "warnings": [],
}
SERIES = {"orders": {"0": 0.0, "1": 0.0, "2": -0.5, "3": 0.0, "4": 0.01}, "energy": -0.49,
          "diagnostics": {"ratio": 0.1, "note": "text"}}


def test_point_key_is_stable_and_normalises_numbers():
    a = point_key(parameters={"U": 4, "t": 1}, size=[4], boundary="open", task="spectrum",
                  options={"levels": 2}, sector={"particles": 4, "sz": 0.0})
    b = point_key(parameters={"t": 1.0, "U": 4.0}, size=(4,), boundary="open", task="spectrum",
                  options={"levels": 2}, sector={"sz": 0.0, "particles": 4})
    c = point_key(parameters={"t": 1.0, "U": 4.0}, size=(4,), boundary="open", task="spectrum",
                  options={"levels": 3}, sector={"sz": 0.0, "particles": 4})
    assert a == b
    assert a != c
    assert len(a) == 20 and int(a, 16) >= 0
    # the key is a pure function of its inputs: a value computed once and written down
    assert a == point_key(parameters={"U": 4.0, "t": 1.0}, size=[4], boundary="open",
                          task="spectrum", options={"levels": 2}, sector={"particles": 4, "sz": 0.0})


def test_atomic_write_leaves_old_file_on_failure(tmp_path):
    path = tmp_path / "rec.json"
    write_json_atomic(path, {"a": 1})

    class Boom:
        pass

    with pytest.raises(TypeError):
        write_json_atomic(path, {"a": Boom()})
    assert json.loads(path.read_text()) == {"a": 1}
    assert sorted(os.listdir(tmp_path)) == ["rec.json"]     # no temporary file left


def test_store_round_trip_and_corrupt_file(tmp_path):
    store = ResultStore(tmp_path / "out")
    store.put(_record("b1", result={"dimension": 36, "energies": [-2.0, -1.5]}))
    store.put(_record("a2", status="error", error={"type": "ModelError", "message": "no", "deterministic": True}))
    assert store.keys() == ["a2", "b1"]
    assert [r["key"] for r in load_results(tmp_path / "out")] == ["a2", "b1"]
    assert store.get("missing") is None
    store.path_for("c3").write_text("{truncated")
    assert store.get("c3") is None
    with pytest.raises(LowfoldError, match="c3.json"):
        store.records()
    with pytest.raises(ModelError, match="not a results directory"):
        load_results(tmp_path)


def test_tidy_rows_for_each_task_and_errors():
    records = [
        _record("k1", result={"dimension": 36, "energies": [-2.0, -1.5]}),
        _record("k2", task="derive", result=DERIVE),
        _record("k3", task="series", result=SERIES),
        _record("k4", status="error", error={"type": "ManifoldError", "message": "no gap"}),
    ]
    rows = table_rows(records)
    by = lambda **kw: [r for r in rows if all(r[k] == v for k, v in kw.items())]   # noqa: E731
    assert [r["value"] for r in by(key="k1", quantity="energy")] == [-2.0, -1.5]
    assert by(key="k1", quantity="dimension")[0]["value"] == 36
    exch = by(key="k2", quantity="coupling", kind="exchange")
    assert {(r["order"], r["value"]) for r in exch} == {("total", 0.49), ("2", 0.5), ("4", -0.01)}
    assert all(r["sites"] == "0-1" for r in exch)
    field = by(key="k2", quantity="coupling", kind="field", order="total")
    assert [(r["component"], r["value"]) for r in field] == [("x", 0.0), ("y", 0.0), ("z", 0.2)]
    assert [r["value"] for r in by(key="k2", quantity="max_abs_error")] == [1e-2, 1e-4]
    assert by(key="k2", quantity="manifold_gap")[0]["value"] == 8.0
    series = by(key="k3", quantity="series")
    assert series[-1]["order"] == "total" and series[-1]["value"] == -0.49
    assert [r["kind"] for r in by(key="k3", quantity="diagnostic")] == ["ratio"]
    failed = by(key="k4")
    assert len(failed) == 1 and failed[0]["error"] == "ManifoldError: no gap"
    assert all(r["U"] == 8.0 and r["size"] == "4" for r in rows)


def test_csv_export(tmp_path):
    store = ResultStore(tmp_path)
    store.put(_record("k1", result={"dimension": 36, "energies": [-2.0, -1.5]}))
    store.put(_record("k2", task="derive", result=DERIVE, U=16.0))
    n = write_csv(tmp_path, tmp_path / "table.csv")
    with open(tmp_path / "table.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == n
    assert list(rows[0])[:5] == ["key", "task", "status", "U", "t"]
    assert {r["U"] for r in rows} == {"8.0", "16.0"}


def test_dataframe_matches_table(tmp_path):
    store = ResultStore(tmp_path)
    store.put(_record("k1", result={"dimension": 36, "energies": [-2.0, -1.5]}))
    try:
        import pandas  # noqa: F401  (optional dependency)
    except ImportError:
        with pytest.raises(ModelError, match="pandas"):
            to_dataframe(tmp_path)
        return
    frame = to_dataframe(tmp_path)
    assert frame.shape[0] == len(table_rows(load_results(tmp_path)))
    assert list(frame["value"]) == [36, -2.0, -1.5]


def test_selectors():
    spec = _record("k1", result={"dimension": 36, "energies": [-2.0, -1.5, -1.0]}, U=8.0, size=(6,))
    assert scalar(spec, "energy") == -2.0
    assert scalar(spec, "energy:2") == -1.0
    assert scalar(spec, "gap:0:1") == pytest.approx(0.5)
    derive = _record("k2", task="derive", result=DERIVE)
    assert scalar(derive, "coupling:exchange:0-1") == 0.49
    assert scalar(derive, "coupling:exchange", order=2) == 0.5
    assert scalar(derive, "coupling:field:1:z") == 0.2
    assert scalar(derive, "error") == 1e-4
    assert scalar(derive, "error", order=2) == 1e-2
    assert scalar(derive, "gap") == pytest.approx(0.5)          # from the check's exact levels
    series = _record("k3", task="series", result=SERIES)
    assert scalar(series, "series") == -0.49
    assert scalar(series, "series", order=2) == -0.5
    assert axis_value(spec, "U") == 8.0
    assert axis_value(spec, "t/U") == 0.125
    assert axis_value(spec, "1/L") == pytest.approx(1 / 6)
    assert axis_value(spec, "N") == 6
    with pytest.raises(ModelError, match="available: exchange:0-1, field:1"):
        scalar(derive, "coupling:dm")
    with pytest.raises(ModelError, match="component"):
        scalar(derive, "coupling:field:1")
    with pytest.raises(ModelError, match="only 3 levels"):
        scalar(spec, "energy:5")
    with pytest.raises(ModelError, match="not a parameter"):
        axis_value(spec, "V")
    with pytest.raises(ModelError, match="unknown quantity"):
        scalar(spec, "magnetisation")
