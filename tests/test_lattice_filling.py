"""The infinite Hubbard chain written as for a finite cluster (H0 = U n_up n_dn, no sector,
no chemical potential): the lowest one-site level holds 0 or 1 electron, the linked-cluster
route takes the Mott state of 1 electron per site and says so, and the couplings are
Takahashi's J1 = 4t^2/U - 16t^4/U^3, J2 = 4t^4/U^3 (Takahashi, J. Phys. C 10, 1289 (1977)).
The exported effective model (an infinite spin chain) derives back to the same classes.
"""

import pytest

from lowfold import derive, load_model
from lowfold.jobs.export import export_text

CHAIN = """\
title = "infinite Hubbard chain"
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "electron"
[parameters]
t = 1.0
U = 10.0
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["hubbard"]
order = 4
"""


def exchange(result, name):
    return next(c for c in result.classes if c.kind == "exchange" and c.name == name)


@pytest.fixture(scope="module")
def chain(tmp_path_factory):
    path = tmp_path_factory.mktemp("chain") / "chain.toml"
    path.write_text(CHAIN)
    return derive(load_model(path), 4)


def test_half_filling_is_chosen_and_said(chain):
    assert any("1 per site" in w for w in chain.warnings)
    assert exchange(chain, "nearest").orders[2] == pytest.approx(4 / 10)
    assert exchange(chain, "nearest").orders[4] == pytest.approx(-16 / 1000)
    assert exchange(chain, "next-nearest").orders[4] == pytest.approx(4 / 1000)
    assert exchange(chain, "nearest").formula == "4 t^2/U - 16 t^4/U^3"


def test_exported_infinite_model_derives_back(chain, tmp_path):
    path = tmp_path / "effective.toml"
    path.write_text(export_text(chain))
    again = derive(load_model(path), 1)
    for name in ("nearest", "next-nearest"):
        assert exchange(again, name).value == pytest.approx(exchange(chain, name).value, abs=1e-12)
