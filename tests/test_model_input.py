"""Input validation of the model layer through the Python API: every bad model is refused
with a typed exception (``ModelError`` or ``SizeError``) whose one-line message names the
file and the key, before anything large is allocated.

The same inputs are run through the installed command in ``test_model_input_cli.py``.
"""

from __future__ import annotations

import json
import math
import tracemalloc
from dataclasses import replace
from fractions import Fraction
from pathlib import Path

import pytest

from helpers.bad_models import ELECTRON_PAIR, PLAIN_SPIN_CHAIN, edit
from lowfold import load_model
from lowfold.build.basis import sector_size
from lowfold.errors import ModelError, SizeError
from lowfold.model.lattice import make_lattice
from lowfold.model.model import Model, PerturbationSpec
from lowfold.model.modelfile import read_toml
from lowfold.model.sector import Sector
from lowfold.model.sites import MAX_RADIX, check_state_space, make_site
from lowfold.model.terms import STRENGTH_LIMIT, Term

SPIN_CHAIN = 'title = "Heisenberg chain"\n' + PLAIN_SPIN_CHAIN


def write(tmp_path: Path, text: str, name: str = "model.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def one_line(exc_info) -> str:
    message = str(exc_info.value)
    assert "\n" not in message and message.isprintable(), repr(message)
    return message


# ---------------------------------------------------------------------------------------
# reading the file


def test_latin1_file_is_a_model_error_with_the_byte_offset(tmp_path):
    # 'h\xe9p' is "hép" in Latin-1; TOML files are UTF-8 (TOML 1.0 specification).
    path = tmp_path / "latin1.toml"
    path.write_bytes(b'title = "h\xe9p"\n')
    with pytest.raises(ModelError) as exc:
        load_model(path)
    message = one_line(exc)
    assert message.startswith(str(path)) and "UTF-8" in message and "offset 10" in message


def test_directory_missing_and_not_a_directory_paths(tmp_path):
    cases = {tmp_path: "is a directory", tmp_path / "missing.toml": "no such file",
             write(tmp_path, SPIN_CHAIN) / "x.toml": "cannot be read"}
    for path, words in cases.items():
        with pytest.raises(ModelError) as exc:
            read_toml(path)
        message = one_line(exc)
        assert message.startswith(f"{path}: ") and words in message, message


def test_unreadable_file_is_a_model_error(tmp_path, monkeypatch):
    # the tests may run as root, for whom chmod 000 does not stop reading: raise the
    # error the operating system gives an unprivileged user instead
    path = write(tmp_path, SPIN_CHAIN)

    def refuse(self):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "read_bytes", refuse)
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc) == f"{path}: permission denied (the file is not readable)"


def test_file_name_with_a_newline_is_shown_escaped(tmp_path):
    path = write(tmp_path, "[site]\ntype = \"spin\"\n", name="a\nb.toml")
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc).startswith(repr(str(path)))


# ---------------------------------------------------------------------------------------
# size guards: refused at construction, before anything large is allocated


def refused_peak(action):
    """``(peak Python allocation, SizeError info)`` of ``action()``, which must raise."""
    tracemalloc.start()
    try:
        with pytest.raises(SizeError) as exc:
            action()
        return tracemalloc.get_traced_memory()[1], exc
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("action, words", [
    (lambda: make_site("boson", max_occupation=2**62), "max_occupation <= 65,535"),
    (lambda: make_site("spin", spin=1e9), "spin <= 32767.5"),
    (lambda: make_lattice("chain", [10**12]), "4,096 sites"),
    (lambda: make_lattice("cubic", [10**4, 10**4, 10**4]), "4,096 sites"),
    (lambda: make_lattice("graph", sites=10**9, bonds=[]), "4,096 sites"),
])
def test_huge_sites_and_lattices_are_refused_without_allocating(action, words):
    peak, exc = refused_peak(action)
    assert words in one_line(exc)
    assert peak < 2**20


def test_nonsense_site_options_are_model_errors():
    for kwargs in ({"max_occupation": float("inf")}, {"max_occupation": "x"},
                   {"max_occupation": 0}, {"max_occupation": 2.5}, {"max_occupation": True}):
        with pytest.raises(ModelError):
            make_site("boson", **kwargs)
    for spin in (float("nan"), float("inf"), "x", -0.5, 0, 0.3, True):
        with pytest.raises(ModelError):
            make_site("spin", spin=spin)
    # the largest allowed values still make sites (tables are built lazily)
    assert make_site("boson", max_occupation=MAX_RADIX - 1).radix == MAX_RADIX
    assert make_site("spin", spin=(MAX_RADIX - 1) / 2).radix == MAX_RADIX


# A state is one int64 of base-radix digits, so radix**slots <= 2**63 - 1.  The bounds
# below are integer arithmetic: 2**62 <= 2**63 - 1 < 2**63; 4**31 = 2**62; for spin 1,
# 3**39 = 4052555153018976267 <= 9223372036854775807 < 3**40 = 12157665459056928801.
@pytest.mark.parametrize("site, largest", [
    (make_site("spin"), 62), (make_site("fermion"), 62), (make_site("electron"), 31),
    (make_site("spin", spin=1), 39), (make_site("spin", spin=1.5), 31),
    (make_site("boson", max_occupation=3), 31),
])
def test_states_must_fit_one_int64(site, largest):
    assert site.radix ** (site.modes * largest) <= 2**63 - 1 < site.radix ** (site.modes * (largest + 1))
    lattice = make_lattice("chain", [largest])
    Model(lattice, site, ())
    check_state_space(site, largest)
    with pytest.raises(SizeError) as exc:
        Model(make_lattice("chain", [largest + 1]), site, ())
    assert f"at most {largest} such sites" in one_line(exc)


def test_model_file_past_the_state_limit_names_the_file(tmp_path):
    path = write(tmp_path, SPIN_CHAIN.replace("size = [4]", "size = [63]"))
    with pytest.raises(SizeError) as exc:
        load_model(path)
    assert one_line(exc).startswith(f"{path}: lattice: 63 spin-1/2 sites do not fit")
    with pytest.raises(SizeError):
        load_model(write(tmp_path, SPIN_CHAIN)).with_lattice(size=[70])


# ---------------------------------------------------------------------------------------
# the H0 / V split


def test_repeated_unperturbed_label_is_refused(tmp_path):
    # H0 is the sum of the named terms, each once; ["ising", "ising"] would double it
    text = SPIN_CHAIN.replace('type = "exchange"', 'type = "exchange"\nlabel = "ising"') + (
        '[[term]]\ntype = "field"\naxis = "x"\nstrength = 0.1\nlabel = "transverse"\n'
        '[perturbation]\nunperturbed = ["ising", "ising"]\n')
    path = write(tmp_path, text)
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc) == (f"{path}: perturbation.unperturbed: 'ising' is listed twice; "
                             "name each term of H0 once")
    with pytest.raises(ModelError, match="listed twice"):
        PerturbationSpec(("ising", "transverse", "ising"))
    assert PerturbationSpec(["ising"]).unperturbed == ("ising",)


# ---------------------------------------------------------------------------------------
# strengths: finite, and small enough that squares of matrix elements stay finite


HUBBARD_DIMER = edit(ELECTRON_PAIR, "[sector]\nparticles = 2\n\n", "")   # no sector


@pytest.mark.parametrize("old, new, key", [
    ("t = 1.0", "t = 1e308", "parameters.t"),
    ("t = 1.0", "t = -1e101", "parameters.t"),
    ("t = 1.0", "t = 1e-200", "parameters.t"),
    ('strength = "U"', "strength = 1e300", "term[1].strength"),
    ("t = 1.0", "t = nan", "parameters.t"),
    ("t = 1.0", "t = inf", "parameters.t"),
])
def test_strengths_past_the_float_range_are_refused(tmp_path, old, new, key):
    # 1e308**2 overflows IEEE-754 doubles (largest 1.8e308); 1e-200**2 underflows to 0
    path = write(tmp_path, HUBBARD_DIMER.replace(old, new))
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc).startswith(f"{path}: {key}: ")


def test_strength_bound_applies_to_python_models(tmp_path):
    model = load_model(write(tmp_path, HUBBARD_DIMER))
    for value in (1e150, float("nan"), -float("inf"), 1e-101, "8"):
        with pytest.raises(ModelError) as exc:
            model.with_parameters(U=value)
        assert one_line(exc).startswith("parameters.U: ")
    hop = model.terms[0]
    with pytest.raises(ModelError, match="outside the strengths"):
        Model(model.lattice, model.site, (replace(hop, strength=2e100),))
    # the edges of the range and zero are accepted
    for value in (0.0, STRENGTH_LIMIT, -1 / STRENGTH_LIMIT):
        assert model.with_parameters(t=value).strength(hop) == value


# ---------------------------------------------------------------------------------------
# labels are one printable line; titles are kept as given


@pytest.mark.parametrize("label", ["ex\nchange", "tab\there", "bell\a", "zero\u200bwidth", ""])
def test_labels_with_control_characters_are_refused(tmp_path, label):
    text = SPIN_CHAIN.replace('type = "exchange"', f'type = "exchange"\nlabel = {json.dumps(label)}')
    path = write(tmp_path, text)
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc).startswith(f"{path}: term[0].label")
    with pytest.raises(ModelError):
        Term(label, "exchange", 1.0)


def test_parameter_names_with_control_characters_are_refused(tmp_path):
    path = write(tmp_path, HUBBARD_DIMER.replace("t = 1.0", '"t\\n" = 1.0\nt = 1.0'))
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert "'t\\n' contains the control character" in one_line(exc)


@pytest.mark.parametrize("title", ["a [/bold] b", "[bold red", "two\nlines", "h\u00e9p \u2192 \u03c0"])
def test_titles_are_kept_exactly_as_given(tmp_path, title):
    model = load_model(write(tmp_path, f"title = {json.dumps(title)}\n" + SPIN_CHAIN.split("\n", 1)[1]))
    assert model.title == title
    assert replace(model).title == title and model.with_parameters().title == title


# ---------------------------------------------------------------------------------------
# sectors


@pytest.mark.parametrize("n_sites, sz", [(2, 0), (4, 0), (4, 1), (3, Fraction(1, 2))])
def test_electron_sector_with_sz_alone_is_the_union_over_particle_numbers(n_sites, sz):
    # Blocks with N_up - N_dn = 2 sz: sum_k C(L, k + 2sz) C(L, k) = C(2L, L + 2sz)
    # (Vandermonde's identity, common practice).
    site = make_site("electron")
    expected = math.comb(2 * n_sites, n_sites + int(2 * sz))
    assert sector_size(site, n_sites, Sector(None, Fraction(sz))) == expected
    model = Model(make_lattice("chain", [n_sites]), site, (), Sector(sz=Fraction(sz)))
    assert model.sector.particles is None


def test_sector_from_filling():
    # Half filling of the Hubbard model is one electron per site (common practice); a
    # filling that gives a fractional particle number is refused, as in scan files.
    assert Sector.from_filling(1, 6) == Sector(6, None)
    assert Sector.from_filling(Fraction(2, 3), 6, sz=0) == Sector(4, Fraction(0))
    assert Sector.from_filling(0.1, 10) == Sector(1, None)       # 0.1 * 10 to rounding
    assert Sector.from_filling(0.5, 4, sz=-0.5).sz == Fraction(-1, 2)
    for filling, n_sites in ((0.3, 4), (Fraction(1, 3), 4), (-1, 4), (float("nan"), 2),
                             ("1", 2), (True, 2), (1, 0), (1, 2.0)):
        with pytest.raises(ModelError) as exc:
            Sector.from_filling(filling, n_sites)
        one_line(exc)
    with pytest.raises(ModelError, match="multiple of 1/2"):
        Sector.from_filling(1, 4, sz=0.3)
    with pytest.raises(ModelError, match="gives 1.2 particles, not an integer"):
        Sector.from_filling(0.3, 4)


def test_sector_from_filling_means_what_scan_files_mean():
    # the shipped scan file fixes filling = 1 over chains of 2 to 6 dots
    from lowfold.scans.run import plan_scan
    from lowfold.scans.scanfile import load_scan

    examples = Path(__file__).resolve().parent.parent / "examples"
    points = plan_scan(load_scan(examples / "scan_hubbard_exchange.toml"))
    assert {p.n_sites for p in points} == {2, 3, 4, 5, 6}
    for point in points:
        assert point.model.sector == Sector.from_filling(1, point.n_sites, sz=point.model.sector.sz)
    # half filling on six sites at S^z = 0: C(6, 3)^2 = 400 states (common practice)
    model = next(p.model for p in points if p.n_sites == 6)
    assert sector_size(model.site, 6, Sector.from_filling(1, 6, sz=0)) == math.comb(6, 3) ** 2
