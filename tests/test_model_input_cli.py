"""Input validation of the model layer through the installed ``lowfold`` command: each bad
model gives exit status 2, nothing on stdout and exactly one line on stderr (no traceback).

All runs start at once from one module fixture (each start-up imports numpy, scipy and
numba).  The same inputs are checked through the Python API in ``test_model_input.py``.
"""

from __future__ import annotations

import json

import pytest

from helpers.bad_models import PLAIN_SPIN_CHAIN
from helpers.cli import one_line_error, run_all

SPIN_CHAIN = PLAIN_SPIN_CHAIN

# name -> (file contents (bytes) or None for a path made by the fixture, command, words
# the single error line must contain)
CASES = {
    "latin1": (b'title = "h\xe9p"\n', "spectrum", ["not UTF-8", "offset 10"]),
    "directory": (None, "spectrum", ["is a directory"]),
    "missing": (None, "spectrum", ["no such file"]),
    "below-a-file": (None, "spectrum", ["cannot be read"]),
    "boson-2**62": (b'[lattice]\nshape = "chain"\nsize = [2]\n[site]\ntype = "boson"\n'
                    b'max_occupation = 4611686018427387904\n[[term]]\ntype = "hopping"\n'
                    b'strength = 1.0\n', "spectrum", ["max_occupation <= 65,535"]),
    "spin-1e9": (SPIN_CHAIN.replace('"spin"', '"spin"\nspin = 1e9').encode(), "spectrum",
                 ["spin <= 32767.5"]),
    "size-1e12": (SPIN_CHAIN.replace("[4]", "[1000000000000]").encode(), "derive",
                  ["4,096 sites"]),
    "hubbard-40-sites": (b'[lattice]\nshape = "chain"\nsize = [40]\n[site]\ntype = "electron"\n'
                         b'[[term]]\ntype = "hopping"\nstrength = 1.0\n', "derive",
                         ["at most 31 such sites"]),
    "unperturbed-twice": ((SPIN_CHAIN.replace('"exchange"', '"exchange"\nlabel = "ising"')
                           + '[[term]]\ntype = "field"\naxis = "x"\nstrength = 0.1\n'
                           '[perturbation]\nunperturbed = ["ising", "ising"]\n').encode(),
                          "derive", ["perturbation.unperturbed: 'ising' is listed twice"]),
    "t-1e308": (SPIN_CHAIN.replace("strength = 1.0", "strength = 1e308").encode(), "spectrum",
                ["term[0].strength: 1e+308 is outside"]),
    "label-newline": (SPIN_CHAIN.replace('"exchange"', '"exchange"\nlabel = "a\\nb"').encode(),
                      "spectrum", ["term[0].label 'a\\nb' contains the control character"]),
}
# S+ S- on bonds without conjugate = true is not Hermitian: every command refuses it alike
NOT_HERMITIAN = (SPIN_CHAIN.replace('"exchange"', '"exchange"\nlabel = "heisenberg"')
                 + '[[term]]\ntype = "product"\nlabel = "flip"\noperators = ["S+", "S-"]\n'
                 'strength = 0.1\n[perturbation]\nunperturbed = ["heisenberg"]\n').encode()
for _command in ("spectrum", "series", "derive"):
    CASES[f"not-hermitian-{_command}"] = (NOT_HERMITIAN, _command, [
        "term[1] (flip) is not Hermitian (on sites 0, 1); add conjugate = true"])


# name -> (file contents, command and options); these must succeed
GOOD = {
    # Electron sector fixing S^z alone: every particle number with N_up - N_dn = 0, on three
    # sites sum_k C(3, k)^2 = C(6, 3) = 20 states (Vandermonde's identity, common practice).
    "electron-sz-only": (b'[lattice]\nshape = "chain"\nsize = [3]\n[site]\ntype = "electron"\n'
                         b'[sector]\nsz = 0\n[[term]]\ntype = "hopping"\nstrength = 1.0\n'
                         b'[[term]]\ntype = "hubbard"\nstrength = 4.0\n',
                         ["spectrum", "--json", "--levels", "1"]),
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("bad-models")
    good = directory / "good.toml"
    good.write_text(SPIN_CHAIN)
    special = {"directory": directory, "missing": directory / "missing.toml",
               "below-a-file": good / "x.toml"}
    jobs = {}
    for name, (contents, command, _) in CASES.items():
        path = special.get(name, directory / f"{name}.toml")
        if contents is not None:
            path.write_bytes(contents)
        jobs[name] = [command, str(path)]
    for name, (contents, args) in GOOD.items():
        path = directory / f"{name}.toml"
        path.write_bytes(contents)
        jobs[name] = [args[0], str(path), *args[1:]]
    return run_all(jobs)


@pytest.mark.parametrize("name", sorted(CASES))
def test_bad_model_is_one_line_and_exit_2(runs, name):
    line = one_line_error(runs[name])
    for words in CASES[name][2]:
        assert words in line, line


def test_electron_sector_with_sz_alone_is_accepted(runs):
    proc = runs["electron-sz-only"]
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout)["dimension"] == 20
