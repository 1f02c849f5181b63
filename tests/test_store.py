"""Result store: stable keys, atomic writes, tidy table, selectors.

The records hold the results of real jobs on tiny models (:mod:`helpers.scan_records`, which
names the known values checked here and their sources).
"""

import csv
import json
import math
import os

import pytest
from helpers.exact import ring_coefficients
from helpers.scan_records import (
    DERIVE_T,
    DERIVE_U,
    FIELD_H,
    SERIES_G,
    SERIES_L,
    SPECTRUM_T,
    SPECTRUM_U,
    dimer_exchange,
    dimer_levels,
    key_of,
    real_result,
    record,
)

from lowfold.errors import ModelError
from lowfold.scans.select import axis_value, scalar
from lowfold.scans.store import (
    ResultStore,
    load_results,
    open_results,
    point_key,
    write_json_atomic,
)
from lowfold.scans.table import table_rows, to_dataframe, write_csv

K1, K2, K3, K4, K5 = (key_of(n) for n in range(1, 6))


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
    store.put(record(K2, result=real_result("spectrum")))
    store.put(record(K1, status="error", error={"type": "ModelError", "message": "no", "deterministic": True}))
    assert store.keys() == [K1, K2]
    assert [r["key"] for r in load_results(tmp_path / "out")] == [K1, K2]
    assert store.get(K3) is None and store.warnings == []
    store.path_for(K3).write_text("{truncated")
    assert store.get(K3) is None
    # an unreadable record is skipped with a warning, not an error that blocks every reader
    reader = open_results(tmp_path / "out")
    assert [r["key"] for r in reader.records()] == [K1, K2]
    assert len(reader.warnings) == 1 and K3 + ".json" in reader.warnings[0]
    with pytest.raises(ModelError, match="not a results directory"):
        load_results(tmp_path)


def test_tidy_rows_for_each_task_and_errors():
    records = [
        record(K1, result=real_result("spectrum")),
        record(K2, task="derive", result=real_result("derive")),
        record(K3, task="series", result=real_result("series")),
        record(K4, status="error", error={"type": "ManifoldError", "message": "no gap"}),
        record(K5, task="derive", result=real_result("field")),
    ]
    rows = table_rows(records)
    by = lambda **kw: [r for r in rows if all(r[k] == v for k, v in kw.items())]
    energies = [r["value"] for r in by(key=K1, quantity="energy")]
    assert energies == pytest.approx(dimer_levels(SPECTRUM_T, SPECTRUM_U)[:3], abs=1e-12)
    assert by(key=K1, quantity="dimension")[0]["value"] == 4          # the S^z = 0 block
    exchange = dimer_exchange(DERIVE_T, DERIVE_U)
    exch = {r["order"]: r["value"] for r in by(key=K2, quantity="coupling", kind="exchange")}
    assert set(exch) == {"total", "2", "4"}
    assert exch["2"] == pytest.approx(exchange[2], rel=1e-10)
    assert exch["4"] == pytest.approx(exchange[4], rel=1e-8)
    assert exch["total"] == pytest.approx(exchange[2] + exchange[4], rel=1e-8)
    assert all(r["sites"] == "0-1" for r in by(key=K2, quantity="coupling", kind="exchange"))
    field = by(key=K5, quantity="coupling", kind="field", sites="1", order="1")
    assert [r["component"] for r in field] == ["x", "y", "z"]
    assert [r["value"] for r in field] == pytest.approx([0.0, 0.0, FIELD_H], abs=1e-14)
    errors = [r["value"] for r in by(key=K2, quantity="max_abs_error")]
    assert len(errors) == 5 and errors[4] < errors[2] < errors[0]    # the check improves with order
    assert by(key=K2, quantity="manifold_dimension")[0]["value"] == 4  # two spins 1/2
    assert by(key=K2, quantity="manifold_energy")[0]["value"] == 0.0
    series = by(key=K3, quantity="series")
    coefficients = ring_coefficients(SERIES_L, 4)
    assert [r["order"] for r in series] == ["0", "1", "2", "3", "4", "total"]
    assert [r["value"] for r in series[:-1]] == pytest.approx(
        [float(c) * SERIES_G**n for n, c in enumerate(coefficients)], rel=1e-10, abs=1e-14)
    assert series[-1]["value"] == pytest.approx(sum(r["value"] for r in series[:-1]), rel=1e-14)
    diagnostics = {r["kind"] for r in by(key=K3, quantity="diagnostic")}
    assert diagnostics == {"exact", "validity_ratio", "first_order_norm", "smallest_denominator"}
    failed = by(key=K4)
    assert len(failed) == 1 and failed[0]["error"] == "ManifoldError: no gap"
    assert all(r["U"] == 8.0 and r["size"] == "2" for r in rows)


def test_a_record_that_does_not_parse_is_one_error_row():
    broken = record(K1, result={"dimension": 4})          # no energies: not a spectrum
    rows = table_rows([broken])
    assert len(rows) == 1 and rows[0]["error"].startswith("ModelError: point " + K1)


def test_csv_export(tmp_path):
    store = ResultStore(tmp_path)
    store.put(record(K1, result=real_result("spectrum")))
    store.put(record(K2, task="derive", result=real_result("derive"), U=16.0))
    n = write_csv(tmp_path, tmp_path / "table.csv")
    with open(tmp_path / "table.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == n
    assert list(rows[0])[:5] == ["key", "task", "status", "U", "t"]
    assert {r["U"] for r in rows} == {"8.0", "16.0"}


def test_dataframe_matches_table(tmp_path):
    store = ResultStore(tmp_path)
    store.put(record(K1, result=real_result("spectrum")))
    try:
        import pandas
    except ImportError:
        with pytest.raises(ModelError, match="pandas"):
            to_dataframe(tmp_path)
        return
    frame = to_dataframe(tmp_path)
    assert frame.shape[0] == len(table_rows(load_results(tmp_path)))
    assert list(frame["value"]) == pytest.approx([4, *dimer_levels(SPECTRUM_T, SPECTRUM_U)[:3]])


def test_selectors():
    levels = dimer_levels(SPECTRUM_T, SPECTRUM_U)
    spec = record(K1, result=real_result("spectrum"), U=8.0, size=(2,))
    assert scalar(spec, "energy") == pytest.approx(levels[0], abs=1e-12)
    assert scalar(spec, "energy:2") == pytest.approx(levels[2], abs=1e-12)
    assert scalar(spec, "gap:0:1") == pytest.approx(levels[1] - levels[0], abs=1e-12)
    derive = record(K2, task="derive", result=real_result("derive"))
    exchange = dimer_exchange(DERIVE_T, DERIVE_U)
    assert scalar(derive, "coupling:exchange:0-1") == pytest.approx(exchange[2] + exchange[4], rel=1e-8)
    assert scalar(derive, "coupling:exchange", order=2) == pytest.approx(exchange[2], rel=1e-10)
    field = record(K5, task="derive", result=real_result("field"))
    assert scalar(field, "coupling:field:1:z", order=1) == pytest.approx(FIELD_H, rel=1e-12)
    # the exact check: levels of the dimer (t = 0.1, U = 1), errors falling with the order
    exact = dimer_levels(DERIVE_T, DERIVE_U)
    assert scalar(derive, "gap") == pytest.approx(exact[1] - exact[0], abs=1e-12)
    assert scalar(derive, "error") == scalar(derive, "error", order=4)
    assert scalar(derive, "error", order=4) < scalar(derive, "error", order=2) < DERIVE_T
    series = record(K3, task="series", result=real_result("series"))
    coefficients = [float(c) * SERIES_G**n for n, c in enumerate(ring_coefficients(SERIES_L, 4))]
    assert scalar(series, "series") == pytest.approx(math.fsum(coefficients), rel=1e-12)
    assert scalar(series, "series", order=2) == pytest.approx(math.fsum(coefficients[:3]), rel=1e-12)
    assert axis_value(spec, "U") == 8.0
    assert axis_value(spec, "t/U") == 0.125
    assert axis_value(spec, "1/L") == pytest.approx(1 / 2)
    assert axis_value(spec, "N") == 2
    with pytest.raises(ModelError, match="available: constant:, exchange:0-1"):
        scalar(derive, "coupling:dm")
    with pytest.raises(ModelError, match="component"):
        scalar(field, "coupling:field:1")
    with pytest.raises(ModelError, match="only 3 levels"):
        scalar(spec, "energy:5")
    with pytest.raises(ModelError, match="holds no series"):
        scalar(derive, "series")
    with pytest.raises(ModelError, match="not a parameter"):
        axis_value(spec, "V")
    with pytest.raises(ModelError, match="unknown quantity"):
        scalar(spec, "magnetisation")
