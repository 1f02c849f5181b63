"""Model files: what a valid file becomes, and a clear ModelError for every bad input.

Each bad input must raise :class:`lowfold.ModelError` (from ``load_model`` or, for checks
that need the compiled Hamiltonian, from ``spectrum``) with a message that names the file
and the offending key.  The broken files (``helpers/bad_models.py``) are shared with
``test_cli.py``, which runs them through the ``lowfold`` command.
"""

from __future__ import annotations

from fractions import Fraction

import pytest

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

import lowfold
from helpers.bad_models import BAD_CASES, ELECTRON_PAIR, SPIN_CHAIN, key_missing, write_case
from lowfold import ModelError


def _parsed(text: str) -> dict:
    return tomllib.loads(text)


CASE_PARAMS = [pytest.param(c, id=c.name) for c in BAD_CASES]


def load_and_run(path: str):
    """Everything a user does with a model file: load it, then compute its spectrum."""
    return lowfold.spectrum(lowfold.load_model(path), levels=1)


# ---------------------------------------------------------------------------------------
# bad inputs


def test_the_base_files_are_valid(tmp_path):
    for name, text in (("spins", SPIN_CHAIN), ("electrons", ELECTRON_PAIR)):
        path = tmp_path / f"{name}.toml"
        path.write_text(text)
        assert load_and_run(str(path)).energies.shape == (1,)


@pytest.mark.parametrize("case", CASE_PARAMS)
def test_bad_input_is_a_model_error(case, tmp_path):
    with pytest.raises(ModelError):
        load_and_run(write_case(case, tmp_path))


@pytest.mark.parametrize("case", CASE_PARAMS)
def test_bad_input_message_names_file_and_key(case, tmp_path):
    path = write_case(case, tmp_path)
    with pytest.raises(ModelError) as info:
        load_and_run(path)
    message = str(info.value)
    assert "\n" not in message
    assert path in message
    assert not key_missing(message, case.keys), message


@pytest.mark.parametrize("levels", [0, -3])
def test_levels_below_one(tmp_path, levels):
    path = tmp_path / "spins.toml"
    path.write_text(SPIN_CHAIN)
    model = lowfold.load_model(path)
    with pytest.raises(ModelError, match="levels"):
        lowfold.spectrum(model, levels=levels)
    with pytest.raises(ModelError, match="levels"):
        lowfold.run_task("spectrum", model, {"levels": levels})


@pytest.mark.parametrize("tolerance", [-1.0, 0.0, 2.0])
def test_tolerance_out_of_range_is_rejected(tolerance):
    data = _parsed(SPIN_CHAIN)
    data["perturbation"] = {"unperturbed": ["legs"], "tolerance": tolerance}
    with pytest.raises(ModelError, match=r"perturbation\.tolerance"):
        lowfold.parse_model(data, source="spins.toml")


@pytest.mark.parametrize("perturbation,key", [
    ({"unperturbed": ["rungs"]}, "perturbation.unperturbed"),       # not a term label
    ({"unperturbed": []}, "perturbation.unperturbed"),
    ({"unperturbed": ["legs"], "order": 0}, "perturbation.order"),
    ({"unperturbed": ["legs"], "order": 2.5}, "perturbation.order"),
    ({"unperturbed": ["legs"], "manifold": "highest"}, "perturbation.manifold"),
    ({"unperturbed": ["legs"], "window": [1.0, 0.0]}, "perturbation.window"),
    ({"unperturbed": ["legs"], "window": [0.0]}, "perturbation.window"),
    ({"unperturbed": ["legs"], "window": [0.0, 1.0], "manifold": "lowest"}, "perturbation"),
])
def test_bad_perturbation_tables(perturbation, key):
    data = _parsed(SPIN_CHAIN)
    data["perturbation"] = perturbation
    with pytest.raises(ModelError, match=key.replace(".", r"\.")) as info:
        lowfold.parse_model(data, source="spins.toml")
    assert str(info.value).startswith("spins.toml: ")


@pytest.mark.parametrize("where,value,key", [
    (("parameters", "J"), "one", "parameters.J"),
    (("parameters", "J"), float("nan"), "parameters.J"),
    (("sector", "sz"), 0.25, "sector.sz"),
    (("sector", "particles"), True, "sector"),
    (("site", "type"), "qutrit", "site"),
    (("site", "spin"), 0.3, "site"),
    (("lattice", "shape"), "hexagon", "lattice"),
    (("lattice", "size"), [0], "lattice"),
    (("lattice", "boundary"), "twisted", "lattice"),
])
def test_bad_values(where, value, key):
    data = _parsed(SPIN_CHAIN)
    table, name = where
    data[table][name] = value
    with pytest.raises(ModelError, match=key.replace(".", r"\.")):
        lowfold.parse_model(data, source="spins.toml")


def test_missing_tables():
    for table in ("lattice", "site"):
        data = _parsed(SPIN_CHAIN)
        del data[table]
        with pytest.raises(ModelError, match=rf"\[{table}\]"):
            lowfold.parse_model(data, source="spins.toml")


def test_model_error_is_a_value_error():
    assert issubclass(ModelError, ValueError)
    assert issubclass(ModelError, lowfold.LowfoldError)


# ---------------------------------------------------------------------------------------
# what a valid file becomes


FULL_FILE = """\
title = "two dots"

[lattice]
shape = "chain"
size = [3]
boundary = "periodic"

[site]
type = "electron"

[sector]
particles = 3
sz = 0.5

[parameters]
t = 1.0
U = 10.0

[[term]]
type = "hopping"
strength = "t"
label = "kinetic"

[[term]]
type = "hubbard"
strength = "U"

[[term]]
type = "potential"
strength = -0.5
sites = [1]
label = "gate"

[perturbation]
unperturbed = ["hubbard", "gate"]
order = 3
"""


def test_valid_file_is_read_as_written(tmp_path):
    path = tmp_path / "dots.toml"
    path.write_text(FULL_FILE)
    model = lowfold.load_model(path)
    assert model.title == "two dots"
    assert model.source == str(path)
    assert model.lattice.n_sites == 3
    assert model.site.type == "electron"
    assert model.sector.particles == 3 and model.sector.sz == Fraction(1, 2)
    assert dict(model.parameters) == {"t": 1.0, "U": 10.0}
    assert [t.label for t in model.terms] == ["kinetic", "hubbard", "gate"]   # label = type
    assert [t.type for t in model.terms] == ["hopping", "hubbard", "potential"]
    assert model.terms[0].strength == "t" and model.terms[2].strength == -0.5
    assert tuple(model.terms[2].sites) == (1,)
    spec = model.perturbation
    assert spec.unperturbed == ("hubbard", "gate") and spec.order == 3
    assert spec.manifold == "lowest" and spec.window is None
    assert model.perturbation_labels == ("kinetic",)


def test_title_defaults_to_file_stem(tmp_path):
    path = tmp_path / "quiet_chain.toml"
    path.write_text(SPIN_CHAIN.replace('title = "four spins in a row"\n', ""))
    model = lowfold.load_model(path)
    assert model.title == "quiet_chain"
    assert model.perturbation is None
    with pytest.raises(ModelError, match="perturbation"):
        model.unperturbed_labels


def test_window_manifold():
    data = _parsed(SPIN_CHAIN)
    data["perturbation"] = {"unperturbed": ["legs"], "window": [-1, 0.5]}
    spec = lowfold.parse_model(data, source="spins.toml").perturbation
    assert spec.window == (-1.0, 0.5) and spec.manifold is None


def test_with_parameters_and_lattice():
    model = lowfold.parse_model(_parsed(SPIN_CHAIN), source="spins.toml")
    changed = model.with_parameters({"J": 2.0})
    assert changed.parameters["J"] == 2.0 and model.parameters["J"] == 1.0
    with pytest.raises(ModelError, match="K"):
        model.with_parameters({"K": 1.0})
    longer = model.with_lattice(size=[6])
    assert longer.lattice.n_sites == 6 and model.lattice.n_sites == 4
    # the Heisenberg spectrum scales with J: E(2J) = 2 E(J)
    e1 = lowfold.spectrum(model, levels=2).energies
    e2 = lowfold.spectrum(changed, levels=2).energies
    assert e2 == pytest.approx(2 * e1, rel=1e-12)


def test_product_default_selectors():
    data = _parsed(SPIN_CHAIN)
    data["sector"] = {}
    data["term"] = [
        {"type": "product", "operators": ["Z", "Z"], "strength": 1.0, "label": "ising"},
        {"type": "product", "operators": ["X"], "strength": 0.5, "label": "flip"},
    ]
    model = lowfold.parse_model(data, source="spins.toml")
    assert model.terms[0].bonds == "nearest" and model.terms[0].sites is None
    assert model.terms[1].sites == "all" and model.terms[1].bonds is None
