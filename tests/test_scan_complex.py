"""Scans of models with complex parameters.

A complex parameter written with parameter names as parts, ``tc = {abs = "t", phase =
"theta"}``, follows the real parameters it names, so a scan over ``t``, ``theta`` or the
flux ``phi`` scans the complex amplitude; stored keys and tables hold real numbers only (a
complex parameter as its parts ``tc.re``, ``tc.im``).

Physics check: the threaded Hubbard triangle (three sites, three electrons, docs/model-files.md
and tests/test_flux_chirality.py) has the third-order chirality ``-24 |t|^3 sin(theta_loop) /
U^2`` on (0, 1, 2) (D. Sen & R. Chitra, PRB 51, 1922 (1995), from memory; sign fixed by the
exact check there), with ``theta_loop`` the phase collected once around 0 -> 1 -> 2 -> 0:
``2 pi Phi`` from the flux and ``-arg t`` from the strength on the bonds (0, 1), (0, 2), (1, 2)
(two passed against their listed direction, one along it; tests/test_flux_chirality.py,
``test_series_third_order_is_the_loop_product``).
"""

from __future__ import annotations

import csv
import math

import pytest

from helpers.modelfiles import model_of
from lowfold import ModelError, derive
from lowfold.scans.plan import plan_scan
from lowfold.scans.scanfile import parse_scan

U = 8.0
TRIANGLE = """
[lattice]
shape = "kagome"
size = [1, 1]
[site]
type = "electron"
[sector]
particles = 3
[parameters]
t = 0.5
theta = 0.0
phi = 0.0
U = 8.0
tc = {abs = "t", phase = "theta"}
[[term]]
type = "hopping"
strength = "tc"
flux = "phi"
[[term]]
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["hubbard"]
order = 3
"""


def chirality(model) -> float:
    found = [c for c in derive(model, compare_exact=False).couplings if c.kind == "chirality"]
    assert all(c.sites == (0, 1, 2) for c in found)
    return float(found[0].orders.get(3, 0.0)) if found else 0.0


def expected(t, theta, phi):
    return -24 * t**3 * math.sin(2 * math.pi * phi - theta) / U**2


def points(grid, model=None):
    model = model_of(TRIANGLE) if model is None else model
    spec = parse_scan({"task": {"name": "derive"}, "grid": grid}, source="triangle scan",
                      model=model)
    return plan_scan(spec, model)


def test_a_scan_over_the_flux_gives_the_chirality_at_each_point():
    planned = points({"phi": [0.05, 0.125, 0.3]})
    for point in planned:
        phi = point.values["phi"]
        assert chirality(point.model) == pytest.approx(expected(0.5, 0.0, phi), rel=1e-9)
        assert point.parameters["tc.re"] == 0.5 and point.parameters["tc.im"] == 0.0


def test_a_scan_over_the_phase_of_the_amplitude_moves_the_loop_phase():
    planned = points({"theta": [0.4, 1.1, -0.7]})
    for point in planned:
        theta = point.values["theta"]
        assert chirality(point.model) == pytest.approx(expected(0.5, theta, 0.0), rel=1e-9)
        assert point.parameters["tc.re"] == pytest.approx(0.5 * math.cos(theta), rel=1e-14)
        assert point.parameters["tc.im"] == pytest.approx(0.5 * math.sin(theta), rel=1e-14)


def test_a_scan_over_the_modulus_scales_like_t_cubed():
    """Zip of t and theta: the chirality scales like |t|^3 at a fixed loop phase."""
    planned = points({"t": [0.2, 0.4], "theta": [0.9, 0.9], "combine": "zip"})
    values = [chirality(p.model) for p in planned]
    assert values[1] / values[0] == pytest.approx(8.0, rel=1e-9)
    assert values[0] == pytest.approx(expected(0.2, 0.9, 0.0), rel=1e-9)


def test_a_re_im_form_and_a_literal_complex_parameter():
    """``{re = "a", im = "b"}`` scans the parts; a literal complex parameter stays fixed while
    a real one is scanned, and is stored as its two parts."""
    text = TRIANGLE.replace('tc = {abs = "t", phase = "theta"}', 'tc = {re = "a", im = "b"}\n'
                            'a = 0.3\nb = 0.4')
    for point in points({"b": [-0.4, 0.4]}, model_of(text)):
        b = point.values["b"]
        assert chirality(point.model) == pytest.approx(expected(0.5, math.atan2(b, 0.3), 0.0),
                                                       rel=1e-9)
    literal = model_of(TRIANGLE.replace('tc = {abs = "t", phase = "theta"}',
                                        "tc = {abs = 0.5, phase = 0.6}"))
    planned = points({"phi": [0.1, 0.2]}, literal)
    for point in planned:
        assert point.parameters["tc.im"] == pytest.approx(0.5 * math.sin(0.6), rel=1e-14)
        assert chirality(point.model) == pytest.approx(
            expected(0.5, 0.6, point.values["phi"]), rel=1e-9)
    assert len({p.key for p in planned}) == 2


def test_scanning_a_complex_parameter_itself_is_refused():
    with pytest.raises(ModelError, match=r"grid\.tc: .*complex; scan the parameters it names "
                                         r"\(t, theta\)"):
        points({"tc": [0.1, 0.2]})
    literal = model_of(TRIANGLE.replace('tc = {abs = "t", phase = "theta"}',
                                        "tc = {abs = 0.5, phase = 0.6}"))
    with pytest.raises(ModelError, match=r"grid\.tc: .*is complex; a scan varies real"):
        points({"tc": [0.1]}, literal)


def test_a_part_name_that_clashes_with_a_parameter_is_refused():
    text = TRIANGLE.replace("U = 8.0\n", 'U = 8.0\n"tc.re" = 1.0\n')
    with pytest.raises(ModelError, match=r"model: parameters: 'tc.re' is also the stored name"):
        points({"phi": [0.1]}, model_of(text))


def test_a_scanned_part_the_form_refuses_names_the_grid_key():
    with pytest.raises(ModelError, match=r"grid\.t: .*modulus must be >= 0"):
        points({"t": [0.5, -0.5]})


@pytest.mark.parametrize("form, match", [
    ('{abs = "nope", phase = 0.1}', "parameters.tc.abs: parameter 'nope' is not defined"),
    ('{abs = "z", phase = 0.1}\nz = {re = 1.0, im = 1.0}', "parameter 'z' is complex"),
    ('{abs = "tc", phase = 0.1}', "parameter 'tc' is complex"),
    ('{re = "t", phase = 0.1}', r"\{re = \.\.\., im = \.\.\.\} or"),
])
def test_bad_forms_are_refused(form, match):
    with pytest.raises(ModelError, match=match):
        model_of(TRIANGLE.replace('{abs = "t", phase = "theta"}', form))


def test_a_computed_parameter_is_changed_through_its_parts():
    model = model_of(TRIANGLE)
    assert model.parameters["tc"] == 0.5
    turned = model.with_parameters(theta=math.pi / 2)
    assert turned.parameters["tc"] == pytest.approx(0.5j, abs=1e-16)
    assert turned.forms["tc"].names == ("t", "theta")
    with pytest.raises(ModelError, match=r"parameters\.tc: computed from t, theta"):
        model.with_parameters(tc=0.3)


def test_a_stored_scan_keeps_real_keys_and_columns(tmp_path):
    """The whole route: run_scan on one worker stores each point with real parameters and
    writes tc.re / tc.im columns; the stored chirality, read as the plots read it, is the
    formula, also at theta = 0 where it vanishes."""
    from distributed import Client

    from lowfold.scans.cluster import start_local_cluster
    from lowfold.scans.run import run_scan
    from lowfold.scans.select import scalar
    from lowfold.scans.store import load_results

    (tmp_path / "triangle.toml").write_text(TRIANGLE)
    (tmp_path / "scan.toml").write_text('model = "triangle.toml"\n[task]\nname = "derive"\n'
                                        'check = false\n[grid]\ntheta = [0.0, 0.3, 0.8]\n')
    with start_local_cluster(1) as cluster, Client(cluster) as client:
        summary = run_scan(tmp_path / "scan.toml", out=tmp_path / "out", client=client,
                           progress=False)
    assert summary.ok and summary.computed == 3
    for record in load_results(tmp_path / "out"):
        assert all(isinstance(v, float) for v in record["parameters"].values())
        theta = record["parameters"]["theta"]
        assert record["parameters"]["tc.im"] == pytest.approx(0.5 * math.sin(theta), rel=1e-14)
        # the selector of the plots: at theta = 0 the readout leaves the chirality out (zero)
        chi = scalar(record, "coupling:chirality:0-1-2", order=3)
        assert chi == pytest.approx(expected(0.5, theta, 0.0), rel=1e-9, abs=1e-15)
        wrong_selectors = ("coupling:chirality:0-1", "coupling:chirality:0-1-7",
                           "coupling:chiral:0-1-2")
        for wrong in wrong_selectors:
            if theta == 0.0:
                with pytest.raises(ModelError, match="no coupling"):
                    scalar(record, wrong)
    with open(tmp_path / "out" / "results.csv", newline="") as handle:
        header = next(csv.reader(handle))
    assert {"tc.re", "tc.im", "t", "theta"} <= set(header)
