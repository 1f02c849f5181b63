"""Hermiticity decided at model construction (``lowfold.model.hermiticity``), checked
against QuSpin's operator matrices (independent exact diagonalisation package) on random
product terms, and through the command line for every command.
"""

from __future__ import annotations

import numpy as np
import pytest

from lowfold.errors import ModelError
from lowfold.model.lattice import make_lattice
from lowfold.model.model import Model
from lowfold.model.sites import make_site
from lowfold.model.terms import Term

L = 3
# our operator names -> QuSpin's (spin_basis_1d with pauli=0 gives S = sigma/2; for
# spinless fermions "+" "-" "n" are c+ c n)
SPIN_NAMES = {"S+": "+", "S-": "-", "Sx": "x", "Sy": "y", "Sz": "z"}
FERMION_NAMES = {"c+": "+", "c": "-", "n": "n"}
ADJOINT = {"S+": "S-", "S-": "S+", "c": "c+", "c+": "c"}


def random_terms(rng, names):
    """Two to four product terms on bonds or sites; often one is the (possibly mis-scaled)
    Hermitian partner of another, so that both verdicts occur."""
    terms = []
    while len(terms) < rng.integers(2, 5):
        if rng.random() < 0.5:
            i, j = rng.choice(L, size=2, replace=False)
            ops = tuple(rng.choice(names, size=2))
            where = {"bonds": ((int(i), int(j)),)}
        else:
            ops = tuple(rng.choice(names, size=rng.integers(1, 4)))
            where = {"sites": (int(rng.integers(L)),)}
        strength = float(rng.choice([1.0, -1.0, 0.5]))
        terms.append(Term(f"p{len(terms)}", "product", strength, operators=ops,
                          conjugate=bool(rng.random() < 0.2), **where))
        if rng.random() < 0.5:                   # the Hermitian partner, maybe mis-scaled
            partner = tuple(ADJOINT.get(o, o) for o in reversed(ops))
            flipped = ({"bonds": (where["bonds"][0][::-1],)} if "bonds" in where else where)
            scale = float(rng.choice([1.0, 1.0, 0.5]))
            terms.append(Term(f"p{len(terms)}", "product", strength * scale, operators=partner,
                              **flipped))
    return terms


def quspin_matrix(terms, site_type):
    from quspin.basis import spin_basis_1d, spinless_fermion_basis_1d
    from quspin.operators import hamiltonian

    if site_type == "spin":
        basis, table = spin_basis_1d(L, pauli=0), SPIN_NAMES
    else:
        basis, table = spinless_fermion_basis_1d(L), FERMION_NAMES
    static = []
    for term in terms:
        placed = [(term.operators, term.bonds[0] if term.bonds else term.sites * len(term.operators))]
        if term.conjugate:
            ops, sites = placed[0]
            placed.append((tuple(ADJOINT.get(o, o) for o in reversed(ops)), tuple(reversed(sites))))
        for ops, sites in placed:
            static.append(["".join(table[o] for o in ops), [[term.strength, *map(int, sites)]]])
    h = hamiltonian(static, [], basis=basis, dtype=np.complex128, check_herm=False,
                    check_symm=False, check_pcon=False)
    return h.toarray()


@pytest.mark.parametrize("site_type", ["spin", "fermion"])
def test_verdict_matches_quspin_matrices(site_type):
    rng = np.random.default_rng(20240611 if site_type == "spin" else 20240612)
    names = list(SPIN_NAMES if site_type == "spin" else FERMION_NAMES)
    site, lattice = make_site(site_type), make_lattice("chain", [L])
    verdicts = []
    for _ in range(80):
        terms = random_terms(rng, names)
        h = quspin_matrix(terms, site_type)
        expected = np.abs(h - h.conj().T).max() <= 1e-10 * max(np.abs(h).max(), 1e-300)
        try:
            Model(lattice, site, tuple(terms))
            accepted = True
        except ModelError as exc:
            assert "is not Hermitian" in str(exc), str(exc)
            accepted = False
        assert accepted == expected, [(t.operators, t.bonds, t.sites, t.strength, t.conjugate)
                                      for t in terms]
        verdicts.append(accepted)
    assert 10 <= sum(verdicts) <= 70          # both verdicts are exercised


def test_operator_identities_do_not_cause_false_refusals():
    # n and S^z of one electron commute, so n Sz is Hermitian although written unsymmetrised
    electron = make_site("electron")
    Model(make_lattice("chain", [2]), electron,
          (Term("nsz", "product", 1.0, sites="all", operators=("n", "Sz")),))
    # c_i c+_j + c_j c+_i ... written as two terms whose sum vanishes: Hermitian (zero)
    fermion = make_site("fermion")
    Model(make_lattice("chain", [3]), fermion,
          (Term("a", "product", 1.0, bonds=((0, 2),), operators=("c+", "c")),
           Term("b", "product", 1.0, bonds=((2, 0),), operators=("c", "c+"))))


def test_non_product_terms_need_real_strengths():
    # (a hopping carries its own conjugate: a complex hopping is Hermitian, issue 12 item 0)
    with pytest.raises(ModelError, match="needs a real strength"):
        Model(make_lattice("chain", [2]), make_site("fermion"), (Term("V", "interaction", 1j),))
