"""``lowfold derive`` and ``lowfold demo`` as a user runs them (installed script, subprocess).

Contract (README "Commands" and docs/output.md): ``--json`` prints one JSON object with the keys
order, manifold{dimension, energy, gap, readout}, terms, couplings, check{exact, by_order},
warnings; ``--latex`` a tabular; ``--no-check`` gives ``check: null``; every user error is
one line on stderr, exit status 2, no traceback.  All commands start at once (each start-up
imports numpy, scipy and numba).
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers.cli import one_json_object, one_line_error, run_all, succeeded
from helpers.derive_models import ISING_CHAIN, NO_GAP_SPINS
from helpers.modelfiles import hubbard_text, write_models

T, U = 0.1, 1.0


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("derive-models")
    dimer = hubbard_text("chain", [2], t=T, U=U, order=4)
    files = {
        "dimer": dimer,
        "ising": ISING_CHAIN,
        "no-gap": NO_GAP_SPINS,
        "non-diagonal": dimer.replace('unperturbed = ["hubbard"]',
                                      'unperturbed = ["hubbard", "hopping"]'),
        "unknown-label": dimer.replace('unperturbed = ["hubbard"]', 'unperturbed = ["hubard"]'),
        "no-perturbation": dimer.split("[perturbation]")[0],
    }
    paths = {name: str(path) for name, path in write_models(directory, files).items()}
    jobs = {
        "json": ["derive", paths["dimer"], "--json", "--check-scaling"],
        "order-2-no-check": ["derive", paths["dimer"], "--order", "2", "--json", "--no-check"],
        "latex": ["derive", paths["dimer"], "--latex"],
        "matrix": ["derive", paths["ising"], "--json"],
        "order-zero": ["derive", paths["dimer"], "--order", "0"],
        "demo": ["demo"],
    }
    for name in ("no-gap", "non-diagonal", "unknown-label", "no-perturbation"):
        jobs[name] = ["derive", paths[name]]
    done = run_all(jobs)
    return {name: (paths.get(name), proc) for name, proc in done.items()}


# ----------------------------------------------------------------------------- JSON contract

def test_json_contract_keys(runs):
    data = one_json_object(runs["json"][1])
    assert {"order", "manifold", "terms", "couplings", "check", "warnings"} <= set(data)
    assert data["order"] == 4
    assert set(data["manifold"]) >= {"dimension", "energy", "gap", "readout"}
    assert data["manifold"] == {"dimension": 4, "energy": 0.0, "gap": U, "readout": "spin-1/2"}
    assert set(data["check"]) >= {"exact", "by_order"}
    assert sorted(data["check"]["by_order"]) == ["0", "1", "2", "3", "4"]
    assert all(set(v) == {"max_abs_error"} for v in data["check"]["by_order"].values())
    assert data["warnings"] == []
    for term in data["terms"]:
        assert set(term) >= {"operator", "coefficient", "orders"}
        assert term["coefficient"] == pytest.approx(sum(term["orders"].values()))
    for c in data["couplings"]:
        assert set(c) >= {"kind", "sites", "value", "orders"}


def test_json_values_of_the_hubbard_dimer(runs):
    # Two-site Hubbard model (closed form, common practice): singlet at
    # -(sqrt(U^2 + 16 t^2) - U)/2, triplet at 0; J = 4t^2/U - 16t^4/U^3 + ...;
    # J (S0.S1 - 1/4) = J/4 (X0 X1 + Y0 Y1 + Z0 Z1) - J/4.
    data = one_json_object(runs["json"][1])
    singlet = -(np.sqrt(U**2 + 16 * T**2) - U) / 2
    np.testing.assert_allclose(data["check"]["exact"], [singlet, 0, 0, 0], atol=1e-12)
    exchange = [c for c in data["couplings"] if c["kind"] == "exchange"]
    assert len(exchange) == 1 and exchange[0]["sites"] == [0, 1]
    j = exchange[0]
    assert set(j["orders"]) == {"2", "4"}
    assert j["orders"]["2"] == pytest.approx(4 * T**2 / U, rel=1e-10)
    assert j["orders"]["4"] == pytest.approx(-16 * T**4 / U**3, rel=1e-8)
    assert j["value"] == pytest.approx(j["orders"]["2"] + j["orders"]["4"])
    assert j["recognised"]["coefficients"] == {"2": "4", "4": "-16"}
    terms = {t["operator"]: t for t in data["terms"]}
    assert set(terms) == {"I", "X0 X1", "Y0 Y1", "Z0 Z1"}
    for name in ("X0 X1", "Y0 Y1", "Z0 Z1"):
        assert terms[name]["coefficient"] == pytest.approx(j["value"] / 4)
    assert terms["I"]["coefficient"] == pytest.approx(-j["value"] / 4)
    errors = [data["check"]["by_order"][n]["max_abs_error"] for n in ("0", "2", "4")]
    assert errors[0] > errors[1] > errors[2]


def test_order_option_and_no_check(runs):
    data = one_json_object(runs["order-2-no-check"][1])
    assert data["order"] == 2
    assert data["check"] is None
    j = next(c for c in data["couplings"] if c["kind"] == "exchange")
    assert j["value"] == pytest.approx(4 * T**2 / U, rel=1e-10)


def test_check_scaling_reports_powers(runs):
    # error of order n falls like (t/U)^(n+1) or faster (Bravyi, DiVincenzo and Loss,
    # Ann. Phys. 326, 2793 (2011), Sec. 3); odd orders vanish for the Hubbard dimer
    data = one_json_object(runs["json"][1])
    for n in ("1", "2", "3", "4"):
        entry = data["scaling"][n]
        assert entry["ok"] and entry["power"] >= int(n) + 1 - 0.2, (n, entry)


def test_matrix_readout_json(runs):
    # Ising chain in a transverse field: P = {uuu, ddd}, tunnelling 2 G^3/Jz^2 at third
    # order (hand calculation in test_derive.py, test_ising_chain_transverse_field_readout)
    data = one_json_object(runs["matrix"][1])
    assert data["manifold"]["readout"].startswith("matrix")
    assert data["terms"] == [] and data["couplings"] == []
    effective = data["effective"]
    assert effective["basis"] == ["uuu", "ddd"]
    third = effective["orders"]["3"]
    assert sorted(zip(third["rows"], third["cols"])) == [(0, 1), (1, 0)]
    assert third["values"] == pytest.approx([2 * 0.05**3, 2 * 0.05**3])


# ----------------------------------------------------------------------------- other outputs

def test_latex_prints_a_tabular(runs):
    out = succeeded(runs["latex"][1]).strip().splitlines()
    assert out[0].startswith(r"\begin{tabular}") and out[-1] == r"\end{tabular}"
    body = "\n".join(out)
    assert "exchange" in body and "order 4" in body and "$0,1$" in body
    rows = [line for line in out if line.endswith(r"\\")]
    assert all(row.count("&") == rows[0].count("&") for row in rows)


def test_demo_runs_the_main_job(runs):
    # the built-in example (four quantum dots, H0 = charging energy) prints the coupling
    # table, the recognised rationals, the check and the validity ratio; exit status 0
    out = succeeded(runs["demo"][1])
    for words in ("demo", "spin-1/2", "exchange", "rational (recognised)",
                  "max |E_eff - E_exact|", "validity ratio"):
        assert words in out, words


# ----------------------------------------------------------------------------- user errors

@pytest.mark.parametrize("case, words", [
    ("order-zero", "order"),
    ("non-diagonal", "not diagonal"),
    ("no-gap", "gap"),
    ("unknown-label", "hubard"),
    ("no-perturbation", "perturbation"),
])
def test_user_error_is_one_line_exit_2(runs, case, words):
    line = one_line_error(runs[case][1])
    assert line.startswith("lowfold: error:") and words in line
