"""Figures: files of the right format and pixel size, slopes, styles that survive greyscale.

The records are built from the exact Hubbard-dimer results (half filling):
E0 = (U - sqrt(U^2 + 16 t^2)) / 2, singlet-triplet gap J = (sqrt(U^2 + 16 t^2) - U) / 2,
whose expansion J = 4t^2/U - 16t^4/U^3 + 128t^6/U^5 - ... gives the perturbative orders
(e.g. Essler et al., "The One-Dimensional Hubbard Model", CUP (2005), the two-site case).
"""

import math
import re
import xml.etree.ElementTree as ET

import matplotlib.image
import numpy as np
import pytest

from lowfold.errors import ModelError
from lowfold.plots.scan_figures import (
    exact_gap,
    plot_couplings,
    plot_errors,
    plot_finite_size,
    plot_levels,
)
from lowfold.plots.style import DPI, FIGSIZE
from lowfold.readout.couplings import Coupling
from lowfold.results import (
    DeriveCheck,
    EffectiveModel,
    ManifoldSummary,
    Spectrum,
    StateSeries,
)

PIXELS = (round(FIGSIZE[1] * DPI), round(FIGSIZE[0] * DPI))


def _base(key, U, *, task, size=2, result):
    return {"key": key, "status": "ok", "task": task, "parameters": {"t": 1.0, "U": U},
            "values": {"U": U, "size": [size]}, "scanned": ["U"], "size": [size],
            "boundary": "open", "n_sites": size, "model": {"title": "Hubbard dimer"},
            "result": result}


def dimer_derive(U):
    # the derive result of the dimer with U as H0 (t = 1), written as a derive job writes it
    root = math.sqrt(U * U + 16.0)
    orders = {2: 4.0 / U, 4: -16.0 / U**3, 6: 128.0 / U**5}
    exact = ((U - root) / 2, 0.0)
    partial = np.cumsum(list(orders.values()))
    exact_j = exact[1] - exact[0]
    errors = {m: abs(p - exact_j) for m, p in zip(orders, partial)}
    result = EffectiveModel(
        order=6, manifold=ManifoldSummary(dimension=4, energy=0.0, gap=U, readout="spin-1/2"),
        couplings=(Coupling("exchange", (0, 1), float(partial[-1]), orders),),
        check=DeriveCheck(exact, errors))
    return _base(f"d{U}", U, task="derive", result=result.to_dict())


def dimer_spectrum(U):
    root = math.sqrt(U * U + 16.0)
    return _base(f"s{U}", U, task="spectrum",
                 result=Spectrum(4, np.array([(U - root) / 2, 0.0])).to_dict())


def dimer_series(U):
    # ground-state energy E0 = -J: series -(4/U) + 16/U^3 - 128/U^5 (odd orders vanish)
    energies = np.array([0.0, 0.0, -4.0 / U, 0.0, 16.0 / U**3, 0.0, -128.0 / U**5])
    result = StateSeries(energies, reference="ud", exact=None, pade=None, ratio_test=None,
                         validity_ratio=None, first_order_norm=0.0)
    return _base(f"r{U}", U, task="series", result=result.to_dict())


U_VALUES = [8.0, 11.0, 16.0, 22.0, 32.0, 45.0, 64.0]


def _check_png(path):
    image = matplotlib.image.imread(path)
    assert image.shape[:2] == PIXELS
    assert image.std() > 0.05                     # not a blank canvas


def _distinct_styles(fig):
    lines = [ln for ln in fig.axes[0].get_lines() if ln.get_label() and not ln.get_label().startswith("_")]
    styles = [(ln.get_marker(), str(ln.get_linestyle()), ln.get_linewidth(), ln.get_color())
              for ln in lines]
    assert len(set(s[:3] for s in styles)) == len(styles)   # greyscale: marker/line/width differ
    assert len(set(s[3] for s in styles)) == len(styles)


def test_couplings_plot_png_and_exact_points(tmp_path):
    records = [dimer_derive(U) for U in U_VALUES]
    out = tmp_path / "exchange.png"
    fig = plot_couplings(records, x="t/U", quantity="coupling:exchange:0-1", unit="t",
                         exact=exact_gap(0, 1), output=out)
    _check_png(out)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "$t / U$" and ax.get_ylabel() == "$J_{0-1} / t$"
    assert ax.get_title() == "Hubbard dimer"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    # the reference is labelled for what it is: the gap E_1 - E_0 (here the dimer's J)
    assert labels == ["through order 2", "through order 4", "through order 6",
                      "exact $(E_{1} - E_{0})$"]
    exact_line = ax.get_lines()[-1]
    x, y = exact_line.get_data()
    assert np.allclose(y, [(math.sqrt(1 / xi**2 + 16) - 1 / xi) / 2 for xi in x])
    _distinct_styles(fig)


def test_error_plot_slopes_match_the_dimer_expansion(tmp_path):
    records = [dimer_derive(U) for U in U_VALUES]
    out = tmp_path / "errors.svg"
    fig = plot_errors(records, x="t/U", unit="t", output=out)
    assert ET.parse(out).getroot().tag.endswith("svg")
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    slopes = [float(re.search(r"slope (-?[\d.]+)", s).group(1)) for s in labels]
    # the error after order n is the first omitted term ~ (t/U)^(n+1) in units of t
    assert slopes == pytest.approx([3.0, 5.0, 7.0], abs=0.1)
    assert fig.axes[0].get_xscale() == "log" and fig.axes[0].get_yscale() == "log"
    # same from the coupling itself against the exact gap
    fig = plot_errors(records, x="t/U", quantity="coupling:exchange", exact=exact_gap(0, 1),
                      output=tmp_path / "errors.pdf")
    assert (tmp_path / "errors.pdf").read_bytes()[:5] == b"%PDF-"
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    slopes = [float(re.search(r"slope (-?[\d.]+)", s).group(1)) for s in labels]
    assert slopes == pytest.approx([3.0, 5.0, 7.0], abs=0.1)
    with pytest.raises(ModelError, match="exact"):
        plot_errors(records, x="t/U", quantity="coupling:exchange")


def test_finite_size_plot_shows_extrapolation(tmp_path):
    records = []
    for U in (10.0, 20.0):
        for L in (4, 6, 8, 10):
            energy = L * (-4 * math.log(2) / U + 0.3 / L**2)
            rec = _base(f"{U}-{L}", U, task="spectrum", size=L,
                        result=Spectrum(1, np.array([energy])).to_dict())
            records.append(rec)
    out = tmp_path / "fss.png"
    fig = plot_finite_size(records, quantity="energy", per_site=True, unit="t", degree=1, power=2,
                           output=out)
    _check_png(out)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "$1 / L^{2}$" and ax.get_ylabel() == "$E_{0} / (N\\,t)$"
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert len(labels) == 2 and labels[0].startswith("U=10: limit -0.277259")
    assert ax.get_xlim()[0] == 0.0


def test_levels_plot_with_series(tmp_path):
    spectra = [dimer_spectrum(U) for U in U_VALUES]
    series = [dimer_series(U) for U in U_VALUES] + [dimer_series(100.0)]   # extra: not matched
    out = tmp_path / "levels.png"
    fig = plot_levels(spectra, x="U", series=series, orders=[2, 6], unit="t", output=out)
    _check_png(out)
    _distinct_styles(fig)
    lines = fig.axes[0].get_lines()
    assert len(lines) == 2 + 2                    # two exact levels, two series orders
    x, y = lines[-1].get_data()
    assert list(x) == U_VALUES
    ground = [(U - math.sqrt(U * U + 16)) / 2 for U in U_VALUES]
    assert np.allclose(y, ground, atol=2e-3)      # series through order 6 close to exact
    with pytest.raises(ModelError, match="no series point matches"):
        plot_levels(spectra, x="U", series=[dimer_series(100.0)])


def test_bad_output_and_failed_points(tmp_path):
    records = [dimer_derive(U) for U in U_VALUES]
    with pytest.raises(ModelError, match="unknown image format"):
        plot_couplings(records, x="U", output=tmp_path / "a.bmp")
    failed = [{"key": "x", "status": "error", "error": {"type": "ModelError", "message": "no"}}]
    with pytest.raises(ModelError, match="no successful points"):
        plot_couplings(failed, x="U")


def test_slices_of_a_scan_with_several_sizes(tmp_path):
    records = [dimer_derive(U) for U in U_VALUES]
    for r in [dimer_derive(U) for U in U_VALUES]:         # a second "size" with other keys
        r = {**r, "key": "L4" + r["key"], "size": [4], "values": {**r["values"], "size": [4]}}
        records.append(r)
    with pytest.raises(ModelError, match=r"several points have t/U = 0.125 \(they differ in size\)"):
        plot_couplings(records, x="t/U")
    fig = plot_couplings(records, x="t/U", where={"size": 4}, output=tmp_path / "slice.png")
    assert len(fig.axes[0].get_lines()[0].get_xdata()) == len(U_VALUES)
    with pytest.raises(ModelError, match="no successful point matches"):
        plot_couplings(records, x="t/U", where={"size": 6})
    with pytest.raises(ModelError, match="'V' is not a grid axis"):
        plot_couplings(records, x="t/U", where={"V": 1.0})


def test_plot_results_dispatch(tmp_path):
    from lowfold.plots.from_directory import plot_results
    from lowfold.scans.store import ResultStore

    store = ResultStore(tmp_path / "res")
    for U in U_VALUES:
        store.put(dimer_spectrum(U))
    summary = plot_results(tmp_path / "res", kind="levels", x="t/U", output=tmp_path / "l.png")
    assert summary == {"kind": "levels", "output": str(tmp_path / "l.png"), "points": len(U_VALUES),
                       "warnings": []}
    _check_png(tmp_path / "l.png")
    with pytest.raises(ModelError, match="unknown plot kind"):
        plot_results(tmp_path / "res", kind="heatmap", x="U", output=tmp_path / "h.png")
    with pytest.raises(ModelError, match="needs an x axis"):
        plot_results(tmp_path / "res", kind="levels", output=tmp_path / "h.png")


def test_sweep_plot_of_a_two_level_system(tmp_path):
    # H = [[0, lam], [lam, 1]]: levels (1 -+ sqrt(1 + 4 lam^2)) / 2; the lower one has the
    # series -lam^2 + lam^4 - 2 lam^6 + 5 lam^8 - ... (signed Catalan numbers; common practice)
    from lowfold.plots.sweep_figure import plot_sweep

    lam = np.linspace(0.0, 0.8, 33)
    root = np.sqrt(1 + 4 * lam**2)
    levels = np.stack([(1 - root) / 2, (1 + root) / 2], axis=1)
    coefficients = {2: -1.0, 4: 1.0, 6: -2.0, 8: 5.0}
    series, total = {}, np.zeros_like(lam)
    for n in range(9):
        total = total + coefficients.get(n, 0.0) * lam**n
        series[str(n)] = total.tolist()
    sweep = {"lambda": lam.tolist(), "levels": levels.tolist(), "sectors": ["all"],
             "level_sectors": np.zeros_like(levels, dtype=int).tolist(),
             "followed": levels[:, 0].tolist(), "series": series,
             "avoided_crossings": [], "crossings": [], "useful_up_to": {}}
    out = tmp_path / "sweep.png"
    fig = plot_sweep(sweep, title="two levels", output=out)
    _check_png(out)
    _distinct_styles(fig)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels[:2] == ["exact levels", "followed level"]
    # orders that add nothing (0, odd) are left out by default
    assert labels[2:] == [f"series through order {n}" for n in (2, 4, 6, 8)]
    highest = fig.axes[0].get_lines()[-1].get_ydata()
    small = lam < 0.2                                  # inside the radius 1/2: series converges
    assert np.allclose(highest[small], levels[small, 0], atol=2e-5)


def test_parse_where():
    from lowfold.plots.where import parse_where

    assert parse_where(["size=4", "U=20", "boundary=open", " sz = 0.5"]) == {
        "size": [4], "U": 20.0, "boundary": "open", "sz": 0.5}
    assert parse_where(["size=4x2"]) == {"size": [4, 2]}
    with pytest.raises(ModelError, match="AXIS=VALUE"):
        parse_where(["size"])
    with pytest.raises(ModelError, match="size must look like"):
        parse_where(["size=big"])


def test_plot_results_couplings_with_exact_gap_string(tmp_path):
    from lowfold.plots.from_directory import plot_results
    from lowfold.scans.store import ResultStore

    store = ResultStore(tmp_path / "res")
    for U in U_VALUES:
        store.put(dimer_derive(U))
    plot_results(tmp_path / "res", kind="couplings", x="t/U", exact_levels="0,1",
                 output=tmp_path / "c.svg")
    assert ET.parse(tmp_path / "c.svg").getroot().tag.endswith("svg")
    with pytest.raises(ModelError, match="two level indices"):
        plot_results(tmp_path / "res", kind="couplings", x="t/U", exact_levels="0",
                     output=tmp_path / "c.svg")
