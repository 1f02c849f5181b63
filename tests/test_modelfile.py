"""Model files: what a valid file becomes, and a clear ModelError for every bad input.

Each bad input must raise :class:`lowfold.ModelError` (from ``load_model`` or, for checks
that need the compiled Hamiltonian, from ``spectrum``) with a message that names the file
and the offending key.  ``BAD_CASES`` is shared with ``test_cli.py``, which runs the same
files through the ``lowfold`` command.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import pytest

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

import lowfold
from lowfold import ModelError

# A valid model that the bad cases below each break in one place.
SPIN_CHAIN = """\
title = "four spins in a row"

[lattice]
shape = "chain"
size = [4]

[site]
type = "spin"
spin = 0.5

[sector]
sz = 0

[parameters]
J = 1.0

[[term]]
type = "exchange"
strength = "J"
label = "legs"
"""

ELECTRON_PAIR = """\
[lattice]
shape = "chain"
size = [2]

[site]
type = "electron"

[sector]
particles = 2

[parameters]
t = 1.0
U = 8.0

[[term]]
type = "hopping"
strength = "t"

[[term]]
type = "hubbard"
strength = "U"
"""


def edit(text: str, old: str, new: str) -> str:
    """``text`` with the single occurrence of ``old`` replaced by ``new``."""
    if text.count(old) != 1:
        raise ValueError(f"{old!r} must occur exactly once")
    return text.replace(old, new)


def _parsed(text: str) -> dict:
    return tomllib.loads(text)


def spins(**replacements) -> str:
    text = SPIN_CHAIN
    for old, new in replacements.items():
        text = edit(text, old, new)
    return text


@dataclass(frozen=True)
class BadCase:
    """A broken model file.

    ``keys``: strings that must all appear in the message (the key and the bad value).
    """

    name: str
    text: str | None                      # None: the file does not exist
    keys: tuple = ()


BAD_CASES = [
    BadCase("unknown-top-level-key", 'colour = "red"\n' + SPIN_CHAIN, ("colour",)),
    BadCase("unknown-lattice-key", spins(**{"size = [4]": "size = [4]\nspacing = 1.0"}),
            ("lattice", "spacing")),
    BadCase("unknown-site-key", spins(**{"spin = 0.5": "spin = 0.5\ng_factor = 2.0"}),
            ("site", "g_factor")),
    BadCase("unknown-sector-key", spins(**{"sz = 0": "sz = 0\ncharge = 0"}),
            ("sector", "charge")),
    BadCase("unknown-term-key", SPIN_CHAIN + "range = 2\n", ("term[0]", "range")),
    BadCase("unknown-perturbation-key",
            SPIN_CHAIN + '\n[perturbation]\nunperturbed = ["legs"]\nmethod = "fast"\n',
            ("perturbation", "method")),
    BadCase("unknown-term-type", spins(**{'type = "exchange"': 'type = "warp"'}),
            ("term[0].type", "warp")),
    BadCase("unknown-operator",
            spins(**{'type = "exchange"': 'type = "product"\noperators = ["Sz", "Q"]'}),
            ("term[0]", "'Q'")),
    BadCase("undefined-parameter", spins(**{'strength = "J"': 'strength = "K"'}),
            ("term[0].strength", "'K'")),
    BadCase("more-electrons-than-modes", edit(ELECTRON_PAIR, "particles = 2", "particles = 5"),
            ("sector", "particles")),
    BadCase("more-bosons-than-cutoff",
            edit(edit(ELECTRON_PAIR, 'type = "electron"', 'type = "boson"\nmax_occupation = 2'),
                 "particles = 2", "particles = 5"),
            ("sector", "particles")),
    BadCase("sz-out-of-range", spins(**{"sz = 0": "sz = 3"}), ("sector", "sz")),
    BadCase("half-integer-sz-integer-spins", spins(**{"spin = 0.5": "spin = 1",
                                                      "sz = 0": "sz = 0.5"}),
            ("sector", "sz")),
    BadCase("integer-sz-odd-number-of-half-spins", spins(**{"size = [4]": "size = [3]"}),
            ("sector", "sz")),
    BadCase("sz-for-spinless-fermions",
            edit(edit(edit(ELECTRON_PAIR, 'type = "electron"', 'type = "fermion"'),
                      "particles = 2", "particles = 1\nsz = 0"),
                 '[[term]]\ntype = "hubbard"\nstrength = "U"\n', ""),
            ("sector", "sz")),
    BadCase("bond-outside-lattice", spins(**{'label = "legs"': 'label = "legs"\nbonds = [[0, 7]]'}),
            ("term[0]", "[0, 7]")),
    BadCase("unknown-bond-class", spins(**{'label = "legs"': 'label = "legs"\nbonds = "fourth"'}),
            ("term[0]", "fourth")),
    BadCase("site-outside-lattice",
            spins(**{'type = "exchange"': 'type = "field"\naxis = "z"\nsites = [9]'}),
            ("term[0]", "9")),
    BadCase("label-used-twice",
            SPIN_CHAIN + '\n[[term]]\ntype = "exchange"\nstrength = 0.5\nlabel = "legs"\n'
                         'bonds = "next-nearest"\n',
            ("term[1].label", "'legs'")),
    BadCase("field-along-x-with-sz-fixed",
            SPIN_CHAIN + '\n[[term]]\ntype = "field"\naxis = "x"\nstrength = 0.1\nlabel = "tilt"\n',
            ("term[1]", "tilt", "S^z")),
    BadCase("pumping-with-particles-fixed",
            edit(ELECTRON_PAIR, '[[term]]\ntype = "hubbard"\nstrength = "U"\n',
                 '[[term]]\ntype = "product"\noperators = ["c+_up"]\nconjugate = true\n'
                 'strength = 0.1\nlabel = "pump"\n'),
            ("term[1]", "pump", "particle")),
    BadCase("non-hermitian-product",
            spins(**{'type = "exchange"': 'type = "product"\noperators = ["S+", "S-"]',
                     'label = "legs"': 'label = "flip"'}),
            ("term[0]", "flip", "Hermitian")),
    BadCase("invalid-toml", spins(**{"[lattice]": "[lattice"}), ("TOML",)),
    BadCase("missing-file", None, ("no such file",)),
    BadCase("term-not-a-table", "term = [1]\n" + SPIN_CHAIN.split("[[term]]")[0],
            ("term[0]",)),
]


def write_case(case: BadCase, directory) -> str:
    """The path of the case's model file (not created for ``missing-file``)."""
    path = directory / f"{case.name}.toml"
    if case.text is not None:
        path.write_text(case.text)
    return str(path)


def key_missing(message: str, keys) -> list:
    """The entries of ``keys`` that ``message`` does not mention."""
    return [key for key in keys if key not in message]


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
