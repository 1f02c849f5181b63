"""docs/output.md against the result objects: every key that ``to_dict()`` writes is
documented, every documented key is written by some run, and ``from_dict`` inverts
``to_dict`` (``from_dict(to_dict(x)).to_dict() == to_dict(x)``).

The jobs run on tiny models chosen so that every optional key appears at least once: a
Hubbard dimer with a fixed S^z (spin form, recognised rationals, the widened sector), an
Ising pair in a field on one site (no spin form: the ``effective`` matrices; errors at
round-off: the ``note`` of the power fit), a one-spin avoided crossing and a Zeeman pair
with a true crossing between S^z sectors (the sweep's lists), a transverse-field Ising pair
(Pade, ratio test, first- and second-order lists), a periodic Hubbard ring of four sites
(coupling classes), the infinite square lattice (classes of several translation orbits).  The physics of these numbers is checked
elsewhere; here only the schema is.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from lowfold import load_model
from helpers.lattice_models import hubbard_text as lattice_hubbard_text
from helpers.modelfiles import hubbard_text
from lowfold.jobs.tasks import parse_lambda_range, run_task
from lowfold.results import EffectiveModel, Spectrum, StateSeries

DOC = Path(__file__).resolve().parent.parent / "docs" / "output.md"

HUBBARD_DIMER = hubbard_text("chain", [2], t=0.1, U=1.0, sz=0, order=4, title="Hubbard dimer")

# a periodic ring: translation invariant, so derive writes coupling classes
HUBBARD_RING = hubbard_text("chain", [4], boundary="periodic", t=0.1, U=1.0, sz=0, order=2,
                            title="Hubbard ring")

SPIN_PAIR = """
title = "two spins"
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "{h0_type}"
{h0_body}
label = "h0"
[[term]]
type = "{v_type}"
{v_body}
label = "v"
[perturbation]
unperturbed = ["h0"]
order = {order}
"""

ONE_SPIN = """
title = "one spin through an avoided crossing"
[lattice]
shape = "chain"
size = [1]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "field"
axis = "z"
strength = -1.0
label = "h0"
[[term]]
type = "field"
axis = "z"
strength = 0.5
label = "tilt"
[[term]]
type = "field"
axis = "x"
strength = 0.1
label = "mixing"
[perturbation]
unperturbed = ["h0"]
order = 4
"""

ISING_FIELD = SPIN_PAIR.format(h0_type="product", h0_body='operators = ["Z", "Z"]\nstrength = 1.0\nbonds = "nearest"',
                               v_type="field", v_body='axis = "z"\nstrength = 0.1\nsites = [0]', order=2)
ZEEMAN = SPIN_PAIR.format(h0_type="field", h0_body='axis = "z"\nstrength = -1.0',
                          v_type="exchange", v_body='strength = 1.0\nbonds = "nearest"', order=4)
TRANSVERSE = SPIN_PAIR.format(h0_type="field", h0_body='axis = "z"\nstrength = -2.0',
                              v_type="product", v_body='operators = ["X", "X"]\nstrength = -0.3\nbonds = "nearest"',
                              order=12)

# an infinite chain: coupling classes and the check on a periodic cluster (check.cluster)
INFINITE_CHAIN = lattice_hubbard_text("chain", order=2)
# the square lattice: the nearest class holds the x and y bonds (classes[].members)
INFINITE_SQUARE = lattice_hubbard_text("square", order=2)

# (task, model text, options, result class)
RUNS = {
    "spectrum": ("spectrum", HUBBARD_DIMER, {"levels": 3}, Spectrum),
    "derive-spin": ("derive", HUBBARD_DIMER, {"check_scaling": True}, EffectiveModel),
    "derive-matrix": ("derive", ISING_FIELD, {"check_scaling": True}, EffectiveModel),
    "derive-unchecked": ("derive", HUBBARD_DIMER, {"check": False}, EffectiveModel),
    "derive-classes": ("derive", HUBBARD_RING, {"check": False}, EffectiveModel),
    "derive-infinite": ("derive", INFINITE_CHAIN, {"check_levels": 2}, EffectiveModel),
    "derive-square": ("derive", INFINITE_SQUARE, {"check": False}, EffectiveModel),
    "series-avoided": ("series", ONE_SPIN, {"sweep": "lambda=0:4:41"}, StateSeries),
    "series-crossing": ("series", ZEEMAN, {"sweep": "lambda=0:2:41"}, StateSeries),
    "series-plain": ("series", TRANSVERSE, {}, StateSeries),
    "derive-exact": ("derive", HUBBARD_RING, {"check": False, "exact_couplings": True},
                     EffectiveModel),
    "derive-matrix-exact": ("derive", ISING_FIELD, {"check": False, "exact_couplings": True},
                            EffectiveModel),
}
SECTIONS = {"spectrum": "spectrum", "derive": "derive", "series": "series"}


def documented_keys() -> dict[str, set[str]]:
    """Section name -> the key paths in the first column of its table."""
    sections, current = {}, None
    for line in DOC.read_text().splitlines():
        heading = re.match(r"## (.+)", line)
        if heading:
            current = sections.setdefault(heading.group(1).strip(), set())
        row = re.match(r"\| `([^`]+)` \|", line)
        if row and current is not None:
            current.add(row.group(1))
    return sections


def key_paths(value, prefix: str = "") -> set[str]:
    """Every key path of a JSON value in the notation of docs/output.md (a map from orders
    ``"0", "1", ...`` to values is one key; the keys of the objects it holds are ``.<n>.key``)."""
    paths = set()
    if isinstance(value, dict):
        ordered = value and all(re.fullmatch(r"\d+", k) for k in value)
        for key, item in value.items():
            path = f"{prefix}.{'<n>' if ordered else key}" if prefix else key
            if not ordered:               # an order map is documented with its container
                paths.add(path)
            paths |= key_paths(item, path)
    elif isinstance(value, list):
        for item in value:
            if isinstance(item, dict):
                paths |= key_paths(item, prefix + "[]")
    return paths


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("models")
    found = {}
    for name, (task, text, options, cls) in RUNS.items():
        path = folder / f"{name}.toml"
        path.write_text(text)
        found[name] = (task, run_task(task, load_model(path), options), cls)
    return found


def test_every_written_key_is_documented_and_every_documented_key_is_written(outputs):
    documented = documented_keys()
    written = {section: set() for section in SECTIONS}
    for task, result, _ in outputs.values():
        data = result.to_dict()
        assert json.loads(json.dumps(data)) == data          # plain JSON, string keys
        written[task] |= key_paths(data)
    for task, section in SECTIONS.items():
        assert written[task] - documented[section] == set(), f"undocumented keys of {task}"
        assert documented[section] - written[task] == set(), f"documented keys {task} never wrote"


@pytest.mark.parametrize("name", list(RUNS))
def test_from_dict_inverts_to_dict(outputs, name):
    _, result, cls = outputs[name]
    assert isinstance(result, cls)
    data = json.loads(json.dumps(result.to_dict()))           # as a reader gets it
    again = cls.from_dict(data)
    assert again.to_dict() == data


def test_python_orders_are_integers_and_json_orders_strings(outputs):
    _, result, _ = outputs["derive-spin"]
    assert result.check is not None and set(result.check.max_abs_error) == set(range(5))
    for coupling in result.couplings:
        assert all(isinstance(m, int) for m in coupling.orders)
    for recognised in result.recognised.values():
        assert all(isinstance(m, int) for m in recognised.coefficients)
    data = result.to_dict()
    assert all(isinstance(k, str) for c in data["couplings"] for k in c["orders"])
    _, series, _ = outputs["series-crossing"]
    assert all(isinstance(m, int) for m in series.sweep.series)


def test_rebuilt_effective_matrices_match(outputs):
    # the matrices of a result without spin form survive the JSON round trip
    _, result, _ = outputs["derive-matrix"]
    again = EffectiveModel.from_dict(json.loads(json.dumps(result.to_dict())))
    assert again.labels == result.labels
    np.testing.assert_allclose(again.matrix(), result.matrix(), rtol=0, atol=1e-14)


def test_sweep_text_is_parsed_once():
    np.testing.assert_allclose(parse_lambda_range("lambda=0:1:5"), np.linspace(0, 1, 5))
