"""Rayleigh-Schroedinger series to order 20 against Lanczos ground-state solves, same run.

Goal: the whole order-20 energy series of one state in less time than five Lanczos
ground-state solves of the same model.

Models:

* ``tfim``: transverse-field Ising ring, H0 = -sum sigma^z (diagonal, unique all-up state),
  V = -g sum X X with g = 0.5; no conserved sector is used (2^L states), L = 12, 16, 20.
* ``ionic``: Hubbard chain at half filling, S^z = 0, open ends, t = 0.3, U = 1, with deep
  wells -Delta = -3 on the even sites (an ionic Hubbard chain).  H0 = hubbard + wells is
  diagonal and, as Delta > U, its lowest state (a pair on every even site) is unique, with a
  gap Delta - U = 2 to the first hop; V = hopping (inside the radius of convergence: the
  Domb-Sykes radius is 1.5 in the factor of V at L = 8).  L = 8, 10.
* ``free``: the same chain without wells, H0 = hopping (not diagonal; the open chain has
  non-degenerate one-particle levels, so the half-filled Fermi sea is unique) and V =
  hubbard with U = 0.5: the iterative (MINRES) route of the series.  L = 8, 10.

Measurements, each in its own subprocess:

* ``series``: basis, H0 and V, then the series core to order 20
  (``rayleigh_schrodinger`` / ``rayleigh_schrodinger_general``); for the non-diagonal H0 the
  H0 ground state (Lanczos on H0, needed to start) is timed with the series;
* ``state_series``: the whole ``lowfold.state_series`` to order 20 (as ``lowfold series``:
  with the exact eigenvalue, Pade table and ratio test);
* ``lanczos``: the full H as CSR, then one ground-state solve,
  ``lowfold.exact.lowest_eigenpairs(H, 1)`` (scipy ``eigsh``, ncv = 20, tol = 0).

Peak memory: each measurement runs in a child of a small probe process (standard library
only), which reads ``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` after its single child
has exited; the baseline row is a child that only imports lowfold and warms up.  Inside a
child, the same code first runs on a small model, so numba compilation (or loading its
cache) is not timed.  Children run with one BLAS / OpenMP thread (shared two-core machine).
The machine is noisy: compare ratios within one run.  Results go to
``benchmarks/results/bench_series.json``.

Usage::

    python benchmarks/bench_series.py            # all models and sizes
    python benchmarks/bench_series.py --quick    # tfim L = 12, 16; ionic L = 8; free L = 8
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_series.json"
ORDER = 20
SIZES = {"tfim": (12, 16, 20), "ionic": (8, 10), "free": (8, 10)}
QUICK = {"tfim": (12, 16), "ionic": (8,), "free": (8,)}
WARM_UP_SIZE = {"tfim": 6, "ionic": 4, "free": 4}
MEASUREMENTS = ("series", "state_series", "lanczos")
GOAL_SOLVES = 5
THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS",
                    "NUMBA_NUM_THREADS")


# --------------------------------------------------------------------------------------
# models (child side)


def model_spec(kind: str, L: int) -> dict:
    """The model as the dictionary of a model file."""
    if kind == "tfim":
        return {
            "title": f"transverse-field Ising ring, {L} sites",
            "lattice": {"shape": "chain", "size": [L], "boundary": "periodic"},
            "site": {"type": "spin", "spin": 0.5},
            "parameters": {"minus_g": -0.5},
            "term": [{"type": "field", "axis": "z", "strength": -2.0, "label": "field"},
                     {"type": "product", "operators": ["X", "X"], "strength": "minus_g",
                      "bonds": "nearest", "label": "ising"}],
            "perturbation": {"unperturbed": ["field"], "order": ORDER},
        }
    terms = [{"type": "hopping", "strength": "t", "bonds": "nearest"},
             {"type": "hubbard", "strength": "U"}]
    if kind == "ionic":
        parameters = {"t": 0.3, "U": 1.0}
        terms.append({"type": "potential", "strength": -3.0, "sites": list(range(0, L, 2)),
                      "label": "wells"})
        unperturbed = ["hubbard", "wells"]
    else:
        parameters = {"t": 1.0, "U": 0.5}
        unperturbed = ["hopping"]
    return {
        "title": f"{kind} Hubbard chain, {L} sites, half filling",
        "lattice": {"shape": "chain", "size": [L], "boundary": "open"},
        "site": {"type": "electron"},
        "sector": {"particles": L, "sz": 0},
        "parameters": parameters,
        "term": terms,
        "perturbation": {"unperturbed": unperturbed, "order": ORDER},
    }


def load(kind: str, L: int):
    import lowfold

    return lowfold.parse_model(model_spec(kind, L), source=f"<bench_series {kind} L={L}>")


def run_series(kind: str, L: int) -> dict:
    """Basis, H0, V and the series core; the timings of its parts."""
    import numpy as np

    import lowfold
    from lowfold.solve.exact import lowest_eigenpairs
    from lowfold.build.hamiltonian import compile_operator
    from lowfold.perturbation.manifold import diagonal_energies

    model = load(kind, L)
    start = time.perf_counter()
    basis = lowfold.build_basis(model)
    v = lowfold.hamiltonian_matrix(model, basis, list(model.perturbation_labels), check=False)
    h0_op = compile_operator(model, list(model.unperturbed_labels))
    if h0_op.is_diagonal:
        h0 = diagonal_energies(h0_op, basis.states)
    else:
        h0 = lowfold.hamiltonian_matrix(model, basis, list(model.unperturbed_labels),
                                        check=False)
    built = time.perf_counter()
    if h0_op.is_diagonal:
        result = lowfold.rayleigh_schrodinger(h0, v, int(np.argmin(h0)), ORDER)
        started = built
    else:
        values, vectors = lowest_eigenpairs(h0, 2, vectors=True)
        started = time.perf_counter()
        result = lowfold.rayleigh_schrodinger_general(h0, v, vectors[:, 0], values[0], ORDER)
    done = time.perf_counter()
    return {"states": int(basis.size), "nnz_v": int(v.nnz), "build_s": built - start,
            "h0_state_s": started - built, "series_s": done - built,
            "per_order_ms": 1e3 * (done - built) / ORDER, "matvecs": int(result.matvecs),
            "solver_iterations": int(result.solver_iterations),
            "energy": float(np.sum(result.energies))}


def run_state_series(kind: str, L: int) -> dict:
    import numpy as np

    import lowfold

    model = load(kind, L)
    start = time.perf_counter()
    result = lowfold.state_series(model, ORDER)
    done = time.perf_counter()
    return {"total_s": done - start, "energy": float(np.sum(result.energies)),
            "exact": result.exact}


def run_lanczos(kind: str, L: int) -> dict:
    import lowfold
    from lowfold.solve.exact import lowest_eigenpairs

    model = load(kind, L)
    start = time.perf_counter()
    basis = lowfold.build_basis(model)
    h = lowfold.hamiltonian_matrix(model, basis, check=False)
    built = time.perf_counter()
    values, _ = lowest_eigenpairs(h, 1)
    done = time.perf_counter()
    return {"states": int(basis.size), "nnz_h": int(h.nnz), "build_s": built - start,
            "solve_s": done - built, "ground_state": float(values[0])}


RUNNERS = {"series": run_series, "state_series": run_state_series, "lanczos": run_lanczos}


def child(task: dict) -> dict:
    """Warm up on a small model of the same kind, then measure (this is the subprocess)."""
    size = WARM_UP_SIZE[task["kind"]]
    if task["measure"] == "baseline":
        for name in MEASUREMENTS:
            RUNNERS[name](task["kind"], size)
        return {}
    RUNNERS[task["measure"]](task["kind"], size)
    return RUNNERS[task["measure"]](task["kind"], task["L"])


# --------------------------------------------------------------------------------------
# probe and parent


def probe(task: dict) -> dict:
    """Run one child and read its peak resident memory: the probe has no other child, so
    ``RUSAGE_CHILDREN.ru_maxrss`` (kB on Linux) is that child's peak."""
    env = dict(os.environ)
    for name in THREAD_VARIABLES:
        env[name] = "1"
    proc = subprocess.run([sys.executable, __file__, "--child", json.dumps(task)],
                          capture_output=True, text=True, env=env)
    peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1:] or ["failed"], "peak_mb": peak_mb}
    return {**json.loads(proc.stdout.strip().splitlines()[-1]), "peak_mb": peak_mb}


def measure(task: dict) -> dict:
    proc = subprocess.run([sys.executable, __file__, "--probe", json.dumps(task)],
                          capture_output=True, text=True)
    if proc.returncode != 0:
        return {"error": [proc.stderr.strip()[-500:]]}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def table(rows: list[dict]) -> str:
    head = (f"{'model':<6} {'L':>3} {'states':>9} {'build s':>8} {'series s':>9} "
            f"{'ms/order':>9} {'state_series s':>14} {'Lanczos s':>10} {'5 Lanczos s':>11} "
            f"{'series/Lanczos':>14} {'goal':>5} {'peak MB (series/full/Lanczos)':>30}")
    lines = [head, "-" * len(head)]
    for r in rows:
        s, f, k = r["series"], r["state_series"], r["lanczos"]
        if any("error" in x for x in (s, f, k)):
            lines.append(f"{r['kind']:<6} {r['L']:>3}  error: "
                         f"{[x.get('error') for x in (s, f, k) if 'error' in x]}")
            continue
        ratio = s["series_s"] / k["solve_s"]
        lines.append(
            f"{r['kind']:<6} {r['L']:>3} {s['states']:>9,} {s['build_s']:>8.2f} "
            f"{s['series_s']:>9.3f} {s['per_order_ms']:>9.2f} {f['total_s']:>14.2f} "
            f"{k['solve_s']:>10.3f} {GOAL_SOLVES * k['solve_s']:>11.2f} {ratio:>14.3f} "
            f"{'met' if ratio < GOAL_SOLVES else 'MISS':>5} "
            f"{s['peak_mb']:>10.0f}/{f['peak_mb']:.0f}/{k['peak_mb']:.0f}")
    return "\n".join(lines)


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="small sizes only")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--probe", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(json.loads(args.child))))
        return
    if args.probe:
        print(json.dumps(probe(json.loads(args.probe))))
        return
    sizes = QUICK if args.quick else SIZES
    baseline = {kind: measure({"kind": kind, "L": 0, "measure": "baseline"})
                for kind in sizes}
    rows = []
    for kind, lengths in sizes.items():
        for L in lengths:
            row = {"kind": kind, "L": L}
            for name in MEASUREMENTS:
                print(f"{kind} L={L}: {name} ...", file=sys.stderr, flush=True)
                row[name] = measure({"kind": kind, "L": L, "measure": name})
            s, k = row["series"], row["lanczos"]
            if "error" not in s and "error" not in k:
                row["series_over_one_lanczos"] = s["series_s"] / k["solve_s"]
                row["goal_met"] = row["series_over_one_lanczos"] < GOAL_SOLVES
                row["series_minus_ground_state"] = s["energy"] - k["ground_state"]
            rows.append(row)
    text = table(rows)
    print(text)
    print("baseline peak MB (imports + warm-up): "
          + ", ".join(f"{k} {v.get('peak_mb', float('nan')):.0f}" for k, v in baseline.items()))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({
        "benchmark": "bench_series", "order": ORDER, "goal": f"series < {GOAL_SOLVES} Lanczos",
        "date": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "python": sys.version.split()[0],
        "machine": platform.platform(), "cpus": os.cpu_count(),
        "load_average": os.getloadavg(), "threads": "1 (BLAS, OpenMP, numba)",
        "baseline": baseline, "rows": rows}, indent=1))
    print(f"written to {args.out}")


if __name__ == "__main__":
    main()
