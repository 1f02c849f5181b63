"""The benchmark that closes the loop: infinite-lattice effective models, exported, against
exact ground-state energies.

Chain: the half-filled Hubbard chain (H0 = U n_up n_dn - (U/2) n, V = hopping t = 1) at
U/t = 8, 12, 16, 20.  For each U, ``derive`` of the infinite chain at orders 2, 4, 6
(linked clusters), ``--export``-ed as a model file (``lowfold.jobs.export``), run on
periodic chains of L = 8 ... 22 sites (``with_lattice``, as ``--size``; L = 24 with
``--lengths``, 40-80 s a model there) and its ground-state energy per site, the constant
per site of the classes added (the export writes it as a comment only: ``-U/2`` at order 0,
``-J/4`` per bond and beyond), compared with

(a) Lanczos of the Hubbard model itself on the same periodic chain (L <= ``--hubbard-max``);
(b) the Heisenberg limit J = 4t^2/U alone: ``-J ln 2 - U/2`` per site on the infinite chain
    (Hulthen, Ark. Mat. Astron. Fys. 26A, No. 11 (1938)), and its finite-L ring values (the
    order-2 model);
(c) the Bethe-ansatz energy per site of the infinite chain (Lieb & Wu, Phys. Rev. Lett. 20,
    1445 (1968)), E/L = -4t int_0^inf dw J0(w) J1(w) / [w (1 + exp(w U / 2t))] - U/2 (the
    -U/2 of the potential in H0), by ``scipy.integrate.quad``; the effective energies are
    also extrapolated in L (E(L) = e + a/L^2 on the three largest L, common practice for
    the periodic Heisenberg chain) and compared with it.

Square lattice: the same model on the infinite square lattice at order 4 (J1, J2, J3, the
ring exchange K of the 4-cycles), exported and run on periodic 2x2, 2x4, 4x4 (and 3x4)
clusters, against Lanczos of the Hubbard model on the clusters that fit (2x2, 2x4, 3x4).
On clusters with a periodic direction of 2 or 3 cells processes of order 4 wind around the
cluster (``lowfold.jobs.check_winding``): the difference there includes them.

Writes ``benchmarks/results/bench_lattice_loop.json``, the exported model files under
``benchmarks/results/lattice_loop/``, and a figure ``benchmarks/results/bench_lattice_loop.png``.

Usage::

    python benchmarks/bench_lattice_loop.py                    # everything (about 20 min)
    python benchmarks/bench_lattice_loop.py --lengths 8 10 12 --us 8 20 --no-square
"""

from __future__ import annotations

import argparse
import json
import math
import platform
import time
import tomllib
from pathlib import Path

import numpy as np
from scipy.integrate import quad
from scipy.special import expit, j0, j1

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"

MODEL = """
title = "Hubbard {shape} of quantum dots, U = {u}"
[lattice]
shape = "{shape}"
boundary = "infinite"
[site]
type = "electron"
[parameters]
t = {t}
U = {u}
mu = {mu}
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[[term]]
label = "mu"
type = "potential"
strength = "mu"
[perturbation]
unperturbed = ["U", "mu"]
order = {order}
"""


# --------------------------------------------------------------------------- references

def bethe_ansatz_energy(u: float, t: float = 1.0) -> float:
    """Ground-state energy per site of the half-filled Hubbard chain, H = -t sum (c+c + h.c.)
    + U sum n_up n_dn (Lieb & Wu, PRL 20, 1445 (1968)), by numerical quadrature.

    The integrand decays like exp(-w U / 2t) for U > 0 (one ``quad`` over [0, inf)); at
    U = 0 only like cos(2w)/w^2, so it is integrated over [0, 2000] in unit pieces (the
    rest is below 1e-7).
    """
    if u < 0 or t <= 0:
        raise ValueError("the Lieb-Wu integral is for U >= 0 and t > 0")

    def integrand(w: float) -> float:
        if w == 0.0:
            return 0.5 * expit(0.0)              # J0(w) J1(w) / w -> 1/2
        return j0(w) * j1(w) / w * expit(-w * u / (2 * t))

    if u > 0:
        value, _ = quad(integrand, 0.0, np.inf, limit=500, epsabs=1e-13, epsrel=1e-12)
    else:
        edges = np.linspace(0.0, 2000.0, 2001)
        value = sum(quad(integrand, a, b, limit=100)[0] for a, b in zip(edges[:-1], edges[1:]))
    return -4.0 * t * value


def heisenberg_limit(u: float, t: float = 1.0) -> float:
    """Energy per site of the Heisenberg limit J = 4t^2/U of the half-filled Hubbard chain
    with the potential -U/2: -J ln 2 - U/2 (Hulthen 1938, with the -J/4 per bond)."""
    return -4 * t**2 / u * math.log(2.0) - u / 2


# --------------------------------------------------------------------------- models

def infinite_model(shape: str, u: float, order: int, t: float = 1.0):
    import lowfold
    return lowfold.parse_model(tomllib.loads(MODEL.format(shape=shape, u=u, t=t, mu=-u / 2,
                                                          order=order)))


def hubbard_energy_per_site(shape: str, u: float, size) -> float:
    """Lanczos ground-state energy per site of the Hubbard model on a periodic cluster
    (half filling, S^z = 0 or 1/2)."""
    import lowfold
    from fractions import Fraction
    model = infinite_model(shape, u, 2).with_lattice(size=list(size), boundary="periodic")
    n = model.n_sites
    model = model.with_sector(lowfold.Sector(particles=n, sz=Fraction(n % 2, 2)))
    return float(lowfold.spectrum(model, levels=1).energies[0]) / n


def exported(shape: str, u: float, order: int, folder: Path):
    """Derive the infinite lattice at ``order``, export it; (path, constant per site,
    seconds of the derive)."""
    import lowfold
    from lowfold.jobs.export import write_export
    start = time.perf_counter()
    result = lowfold.derive(infinite_model(shape, u, order), order, compare_exact=False)
    seconds = time.perf_counter() - start
    path = write_export(result, folder / f"{shape}_U{u:g}_order{order}.toml")
    constant = next((c for c in result.classes if c.kind == "constant"), None)
    per_site = float(sum(constant.orders.values())) if constant else 0.0
    return path, per_site, seconds


def effective_energy_per_site(path: Path, per_site: float, size) -> float:
    """Ground-state energy per site of the exported spin model on a periodic cluster
    (S^z = 0 or 1/2), with the constant per site added."""
    import lowfold
    from fractions import Fraction
    model = lowfold.load_model(path).with_lattice(size=list(size), boundary="periodic")
    n = model.n_sites
    model = model.with_sector(lowfold.Sector(sz=Fraction(n % 2, 2)))
    return float(lowfold.spectrum(model, levels=1).energies[0]) / n + per_site


def extrapolate(lengths, energies) -> float:
    """e of E(L) = e + a / L^2 fitted to the three largest L (least squares)."""
    pairs = sorted(zip(lengths, energies))[-3:]
    x = np.array([1.0 / n**2 for n, _ in pairs])
    y = np.array([e for _, e in pairs])
    return float(np.polyfit(x, y, 1)[1])


# --------------------------------------------------------------------------- runs

def run_chain(us, orders, lengths, hubbard_max, folder, say) -> dict:
    out = {}
    for u in us:
        row = {"bethe_ansatz": bethe_ansatz_energy(u) - u / 2,
               "heisenberg_limit": heisenberg_limit(u), "hubbard": {}, "orders": {}}
        for n in lengths:
            if n <= hubbard_max:
                start = time.perf_counter()
                row["hubbard"][str(n)] = hubbard_energy_per_site("chain", u, [n])
                say(f"chain U={u:g}: Hubbard L={n} in {time.perf_counter() - start:.1f} s")
        for order in orders:
            path, per_site, seconds = exported("chain", u, order, folder)
            energies = {}
            for n in lengths:
                start = time.perf_counter()
                energies[str(n)] = effective_energy_per_site(path, per_site, [n])
                say(f"chain U={u:g} order {order}: L={n} in {time.perf_counter() - start:.1f} s")
            e_inf = extrapolate([int(n) for n in energies], list(energies.values()))
            row["orders"][str(order)] = {
                "export": str(path.relative_to(HERE.parent)), "constant_per_site": per_site,
                "derive_seconds": seconds, "energy": energies, "extrapolated": e_inf,
                "error_vs_hubbard": {n: energies[n] - e for n, e in row["hubbard"].items()},
                "error_vs_bethe_ansatz": {n: e - row["bethe_ansatz"] for n, e in energies.items()},
                "extrapolated_error_vs_bethe_ansatz": e_inf - row["bethe_ansatz"]}
        out[f"{u:g}"] = row
    return out


def run_square(us, spin_sizes, hubbard_sizes, folder, say) -> dict:
    out = {}
    for u in us:
        path, per_site, seconds = exported("square", u, 4, folder)
        row = {"export": str(path.relative_to(HERE.parent)), "constant_per_site": per_site,
               "derive_seconds": seconds, "effective": {}, "hubbard": {}, "error": {}}
        for size in spin_sizes:
            key = "x".join(map(str, size))
            start = time.perf_counter()
            row["effective"][key] = effective_energy_per_site(path, per_site, size)
            say(f"square U={u:g}: effective {key} in {time.perf_counter() - start:.1f} s")
        for size in hubbard_sizes:
            key = "x".join(map(str, size))
            start = time.perf_counter()
            row["hubbard"][key] = hubbard_energy_per_site("square", u, size)
            say(f"square U={u:g}: Hubbard {key} in {time.perf_counter() - start:.1f} s")
            if key in row["effective"]:
                row["error"][key] = row["effective"][key] - row["hubbard"][key]
        out[f"{u:g}"] = row
    return out


# --------------------------------------------------------------------------- output

def print_tables(data: dict) -> None:
    chain = data["chain"]
    hub = sorted({int(n) for row in chain.values() for n in row["hubbard"]})
    lengths = sorted({int(n) for row in chain.values()
                      for o in row["orders"].values() for n in o["energy"]})
    print("\nHubbard chain: E/L of the exported effective model minus the reference")
    head = (["U/t", "order"] + [f"Hub L={n}" for n in hub] + [f"BA L={lengths[-1]}", "BA L->inf"])
    print("  ".join(f"{h:>11}" for h in head))
    for u, row in chain.items():
        for order, o in row["orders"].items():
            cells = [u, order] + [f"{o['error_vs_hubbard'][str(n)]:+.3e}" for n in hub]
            cells += [f"{o['error_vs_bethe_ansatz'][str(lengths[-1])]:+.3e}",
                      f"{o['extrapolated_error_vs_bethe_ansatz']:+.3e}"]
            print("  ".join(f"{c:>11}" for c in cells))
        cells = [u, "J only"] + [""] * len(hub) + ["", f"{row['heisenberg_limit'] - row['bethe_ansatz']:+.3e}"]
        print("  ".join(f"{c:>11}" for c in cells))
    print("\n(BA: Bethe ansatz, Lieb & Wu 1968; 'J only': Heisenberg limit -J ln2 - U/2)")
    for order, slope in slopes(chain).items():
        print(f"order {order}: error vs Hubbard L={hub[-1]} falls like U^{slope:.2f} "
              f"(expected U^-{int(order) + 1}: the next non-zero order, t^{int(order) + 2}"
              f"/U^{int(order) + 1})")
    if data.get("square"):
        print("\nSquare lattice, order 4: E/N of the exported model minus Hubbard Lanczos")
        for u, row in data["square"].items():
            cells = [f"{k}: {v:+.3e}" for k, v in row["error"].items()]
            eff = [f"{k}: {v:.6f}" for k, v in row["effective"].items()]
            print(f"  U={u:>4}  errors {'  '.join(cells)}   effective E/N {'  '.join(eff)}")


def slopes(chain: dict) -> dict:
    """Power of U in the error against the Hubbard model on the largest L computed (a
    least-squares line in log-log over the U values)."""
    hub = max((int(n) for row in chain.values() for n in row["hubbard"]), default=None)
    out = {}
    if hub is None or len(chain) < 2:
        return out
    for order in sorted({o for row in chain.values() for o in row["orders"]}, key=int):
        us = [float(u) for u in chain]
        errors = [abs(row["orders"][order]["error_vs_hubbard"][str(hub)]) for row in chain.values()]
        out[order] = float(np.polyfit(np.log(us), np.log(errors), 1)[0])
    return out


def figure(data: dict, path: Path) -> None:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(1, 2 if data.get("square") else 1, figsize=(11, 4.2), squeeze=False)
    ax = axes[0][0]
    chain = data["chain"]
    us = [float(u) for u in chain]
    hub = max(int(n) for row in chain.values() for n in row["hubbard"]) if any(
        row["hubbard"] for row in chain.values()) else None
    for order in sorted({o for row in chain.values() for o in row["orders"]}, key=int):
        if hub is not None:
            ax.loglog(us, [abs(chain[u]["orders"][order]["error_vs_hubbard"][str(hub)])
                           for u in chain], "o-", label=f"order {order} vs Hubbard L={hub}")
        ax.loglog(us, [abs(chain[u]["orders"][order]["extrapolated_error_vs_bethe_ansatz"])
                       for u in chain], "s--", label=f"order {order} (L->inf) vs Bethe ansatz")
    ax.loglog(us, [abs(chain[u]["heisenberg_limit"] - chain[u]["bethe_ansatz"]) for u in chain],
              "k:", label="Heisenberg limit vs Bethe ansatz")
    ax.set_xlabel("U/t")
    ax.set_ylabel("|error of E/L| (t)")
    ax.set_title("Hubbard chain: exported effective models")
    ax.legend(fontsize=7)
    if data.get("square"):
        ax = axes[0][1]
        square = data["square"]
        keys = sorted({k for row in square.values() for k in row["error"]})
        for key in keys:
            ax.loglog([float(u) for u in square],
                      [abs(row["error"].get(key, np.nan)) for row in square.values()], "o-",
                      label=f"{key} cluster")
        ax.set_xlabel("U/t")
        ax.set_ylabel("|error of E/N| (t)")
        ax.set_title("Square lattice, order 4, vs Hubbard Lanczos")
        ax.legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=120)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--us", type=float, nargs="+", default=[8.0, 12.0, 16.0, 20.0])
    parser.add_argument("--orders", type=int, nargs="+", default=[2, 4, 6])
    parser.add_argument("--lengths", type=int, nargs="+", default=list(range(8, 23, 2)))
    parser.add_argument("--hubbard-max", type=int, default=12)
    parser.add_argument("--no-square", action="store_true")
    parser.add_argument("--square-hubbard", nargs="+", default=["2x2", "2x4", "3x4"])
    parser.add_argument("--out", type=Path, default=RESULTS / "bench_lattice_loop.json")
    parser.add_argument("--from", dest="saved", type=Path,
                        help="print the table and draw the figure of a JSON written before")
    args = parser.parse_args()
    if args.saved is not None:
        data = json.loads(args.saved.read_text())
        print_tables(data)
        figure(data, args.saved.with_suffix(".png"))
        return
    folder = RESULTS / "lattice_loop"
    folder.mkdir(parents=True, exist_ok=True)
    say = lambda text: print(text, flush=True)           # noqa: E731
    start = time.perf_counter()
    data = {"machine": platform.platform(), "python": platform.python_version(),
            "chain": run_chain(args.us, args.orders, args.lengths, args.hubbard_max, folder, say)}
    if not args.no_square:
        spin = [(2, 2), (2, 4), (3, 4), (4, 4)]
        hubbard = [tuple(int(x) for x in s.split("x")) for s in args.square_hubbard]
        data["square"] = run_square(args.us, spin, hubbard, folder, say)
    data["slopes_vs_hubbard"] = slopes(data["chain"])
    data["seconds"] = time.perf_counter() - start
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(data, indent=1, allow_nan=False) + "\n")
    print_tables(data)
    picture = args.out.with_suffix(".png")
    figure(data, picture)
    print(f"\nwritten: {args.out} and {picture} ({data['seconds']:.0f} s)")


if __name__ == "__main__":
    main()
