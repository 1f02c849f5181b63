"""Hamiltonian build and ground-state timings of lowfold against QuSpin, in the same run.

Models (periodic chains, t = J = 1, U = 4):

* Hubbard chain at half filling, S^z = 0 (N_up = N_dn = L/2), L = 8, 10, 12
  (853,776 states and 12.0 M non-zeros at L = 12);
* spin-1/2 Heisenberg chain at S^z = 0, L = 16, 20, 24.

Every measurement runs in its own subprocess, so its peak memory (``ru_maxrss`` of that
child, read with ``os.wait4``) belongs to it alone; both tools get the same thread settings
(``NUMBA_NUM_THREADS``, ``OMP_NUM_THREADS`` and the BLAS thread variables).  Inside a child,
the numba kernels (or QuSpin) and the solver first run on a small model of the same kind, so compile
time is not counted.  A measurement is one whole run: the basis and Hamiltonian build, then
the lowest eigenvalue.  Variants:

* ``quspin``: QuSpin ``hamiltonian`` (checks off) and ``scipy.sparse.linalg.eigsh`` on its
  CSR matrix (k = 1, which = "SA", ncv = 20, tol = 0, as lowfold's ``exact`` module);
* ``csr-eigsh``: lowfold CSR matrix and ``lowfold.exact.lowest_eigenpairs`` (eigsh);
* ``csr-lanczos``: lowfold CSR matrix and ``lowfold.lanczos.lanczos_lowest``;
* ``mf-lanczos``: lowfold matrix-free operator and ``lanczos_lowest``.

lowfold builds through its ``route="auto"`` (species split for the Hubbard ring, bit-mask
strings for the Heisenberg ring); ``--route general`` measures the any-radix kernels instead.

The machines are shared and noisy: compare the ratios of one run, not times across runs.
Results go to ``benchmarks/results/bench_build.json``.

Usage::

    python benchmarks/bench_build.py                 # all sizes, all variants
    python benchmarks/bench_build.py --quick         # L = 8 Hubbard, L = 16 Heisenberg
    python benchmarks/bench_build.py --sizes hubbard=10,12 heisenberg=20
    python benchmarks/bench_build.py --skip-quspin --variants csr-lanczos
    python benchmarks/bench_build.py --l14           # also the 11.8 M-state matrix-free run
    python benchmarks/bench_build.py --route general # lowfold's any-radix kernels
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_build.json"
SIZES = {"hubbard": (8, 10, 12), "heisenberg": (16, 20, 24)}
QUICK = {"hubbard": (8,), "heisenberg": (16,)}
WARM_UP_SIZE = {"hubbard": 6, "heisenberg": 10}
VARIANTS = ("csr-eigsh", "csr-lanczos", "mf-lanczos")
HUBBARD_U = 4.0
THREAD_VARIABLES = ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS")
BLAS_VARIABLES = ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


# --------------------------------------------------------------------------------------
# models (child side)


def lowfold_model(kind: str, L: int):
    import lowfold

    if kind == "hubbard":
        spec = {
            "title": f"Hubbard ring, {L} sites, half filling",
            "lattice": {"shape": "chain", "size": [L], "boundary": "periodic"},
            "site": {"type": "electron"},
            "sector": {"particles": L, "sz": 0},
            "parameters": {"t": 1.0, "U": HUBBARD_U},
            "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
                     {"type": "hubbard", "strength": "U"}],
        }
    else:
        spec = {
            "title": f"Heisenberg ring, {L} spins 1/2",
            "lattice": {"shape": "chain", "size": [L], "boundary": "periodic"},
            "site": {"type": "spin", "spin": 0.5},
            "sector": {"sz": 0},
            "parameters": {"J": 1.0},
            "term": [{"type": "exchange", "strength": "J", "bonds": "nearest"}],
        }
    return lowfold.parse_model(spec, source="<bench_build>")


def quspin_build(kind: str, L: int):
    """QuSpin basis and CSR matrix of the same model (bonds written out by hand)."""
    import numpy as np
    from quspin.basis import spin_basis_1d, spinful_fermion_basis_1d
    from quspin.operators import hamiltonian

    bonds = [(i, (i + 1) % L) for i in range(L)]
    if kind == "hubbard":
        basis = spinful_fermion_basis_1d(L, Nf=(L // 2, L // 2))
        hop = [[-1.0, i, j] for i, j in bonds] + [[-1.0, j, i] for i, j in bonds]
        static = [["+-|", hop], ["|+-", hop], ["n|n", [[HUBBARD_U, i, i] for i in range(L)]]]
    else:
        basis = spin_basis_1d(L, Nup=L // 2, pauli=0)
        static = [["zz", [[1.0, i, j] for i, j in bonds]],
                  ["+-", [[0.5, i, j] for i, j in bonds]],
                  ["-+", [[0.5, i, j] for i, j in bonds]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_herm=False,
                    check_pcon=False, check_symm=False)
    return basis.Ns, h.tocsr()


class Counted:
    """A LinearOperator-like wrapper counting products (only ``shape``, ``dtype``,
    ``matvec`` and ``@`` are needed by the solvers)."""

    def __init__(self, inner):
        from scipy.sparse.linalg import LinearOperator

        self.count = 0

        def matvec(x):
            self.count += 1
            return inner @ x

        self.operator = LinearOperator(inner.shape, matvec=matvec, rmatvec=matvec,
                                       dtype=inner.dtype)


def lowfold_build(kind: str, L: int, form: str, route: str = "auto"):
    """(states, nnz or None, operator) built through lowfold's public functions."""
    import lowfold

    model = lowfold_model(kind, L)
    basis = lowfold.build_basis(model)
    if form == "csr":
        matrix = lowfold.hamiltonian_matrix(model, basis, check=False, route=route)
        return basis.size, int(matrix.nnz), matrix
    operator = lowfold.hamiltonian_operator(model, basis, check=False, route=route)
    return basis.size, None, operator


def solve(operator, solver: str, levels: int, seed: int):
    """Lowest ``levels`` energies and the number of products."""
    import numpy as np

    counted = Counted(operator)
    if solver == "eigsh":
        from lowfold.solve.exact import lowest_eigenpairs

        energies, _ = lowest_eigenpairs(counted.operator, levels,
                                        rng=np.random.default_rng(seed))
    elif solver == "scipy-eigsh":
        from scipy.sparse.linalg import eigsh

        v0 = np.random.default_rng(seed).standard_normal(operator.shape[0])
        energies = eigsh(counted.operator, k=levels, which="SA", v0=v0,
                         ncv=max(2 * levels + 1, 20), tol=0, return_eigenvectors=False)
    else:
        from lowfold.solve.lanczos import lanczos_lowest

        energies = lanczos_lowest(counted.operator, levels,
                                  rng=np.random.default_rng(seed)).energies
    return sorted(float(e) for e in energies), counted.count


def warm_up(task: dict) -> None:
    """Run the same code path on a small model (a few hundred states), so numba compiles
    (or loads its cache) and lazy imports happen outside the timed region."""
    import numpy as np

    L = WARM_UP_SIZE[task["kind"]]
    if task["tool"] == "quspin":
        _, matrix = quspin_build(task["kind"], L)
    else:
        _, _, matrix = lowfold_build(task["kind"], L, task["form"], task.get("route", "auto"))
    matrix @ np.ones(matrix.shape[0])
    solve(matrix, task["solver"], 1, 0)


def child(task: dict) -> dict:
    """One measurement; returns a JSON-able dict (this runs in the subprocess)."""
    import resource

    import numpy as np

    warm_up(task)
    baseline = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    start = time.perf_counter()
    if task["tool"] == "quspin":
        states, matrix = quspin_build(task["kind"], task["L"])
        operator, nnz = matrix, int(matrix.nnz)
    else:
        states, nnz, operator = lowfold_build(task["kind"], task["L"], task["form"],
                                              task.get("route", "auto"))
    built = time.perf_counter()
    energies, matvecs = solve(operator, task["solver"], task["levels"], task["seed"])
    done = time.perf_counter()
    return {"states": int(states), "nnz": nnz, "build_s": built - start,
            "ground_state_s": done - built, "total_s": done - start, "matvecs": matvecs,
            "energies": energies, "baseline_mb": baseline,
            "index_dtype": str(getattr(operator, "indices", np.zeros(0, np.int32)).dtype)}


# --------------------------------------------------------------------------------------
# parent side


def run_child(task: dict, env: dict, timeout: float) -> dict:
    """Run one task in a fresh interpreter; add its peak memory (``ru_maxrss``)."""
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        proc = subprocess.Popen([sys.executable, __file__, "--child", json.dumps(task)],
                                stdout=out, stderr=err, env=env)
        deadline = time.monotonic() + timeout
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                break
            if time.monotonic() > deadline:
                proc.kill()
                pid, status, usage = os.wait4(proc.pid, 0)
                proc.returncode = -9
                return dict(task, error=f"timed out after {timeout:.0f} s")
            time.sleep(0.05)
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        lines = [line for line in out.read().splitlines() if line.startswith("{")]
        if proc.returncode != 0 or not lines:
            tail = err.read().strip().splitlines()[-3:]
            return dict(task, error=f"exit {proc.returncode}: {' | '.join(tail)}")
    result = dict(task, **json.loads(lines[-1]))
    result["peak_mb"] = usage.ru_maxrss / 1024
    result["load_before"] = load_before
    result["load_after"] = os.getloadavg()[0]
    return result


def tasks_for(kind: str, L: int, variants, *, quspin: bool, levels: int, seed: int,
              mf_max_states: int, route: str = "auto") -> list[dict]:
    from math import comb

    states = comb(L, L // 2) ** 2 if kind == "hubbard" else comb(L, L // 2)
    base = {"kind": kind, "L": L, "levels": levels, "seed": seed, "route": route}
    tasks = []
    if quspin:
        tasks.append(dict(base, tool="quspin", variant="quspin", form="csr",
                          solver="scipy-eigsh"))
    for variant in variants:
        form, solver = variant.split("-")
        if form == "mf" and states > mf_max_states:
            continue
        tasks.append(dict(base, tool="lowfold", variant=variant,
                          form="csr" if form == "csr" else "matrix-free", solver=solver))
    return tasks


def parse_sizes(tokens) -> dict:
    sizes = {}
    for token in tokens:
        if token == "none":
            continue
        name, _, values = token.partition("=")
        if name not in SIZES or not values:
            raise SystemExit(f"--sizes: expected hubbard=8,10 or heisenberg=16,..., got {token!r}")
        sizes[name] = tuple(int(v) for v in values.split(","))
        if name == "hubbard" and any(L % 2 for L in sizes[name]):
            raise SystemExit("--sizes: half filling with S^z = 0 needs even Hubbard L")
        if name == "heisenberg" and any(L % 2 for L in sizes[name]):
            raise SystemExit("--sizes: S^z = 0 needs even Heisenberg L")
    return sizes


def ratio(a, b):
    return None if a is None or b is None or b == 0 else a / b


def summarise(results: list[dict]) -> list[dict]:
    """One row per lowfold variant, with the QuSpin run of the same model beside it."""
    rows = []
    reference = {(r["kind"], r["L"]): r for r in results
                 if r["tool"] == "quspin" and "error" not in r}
    nonzeros = {(r["kind"], r["L"]): r["nnz"] for r in results if r.get("nnz")}
    for r in results:
        if r["tool"] != "lowfold":
            continue
        q = reference.get((r["kind"], r["L"]), {})
        ok = "error" not in r
        row = {"model": r["kind"], "L": r["L"], "variant": r["variant"],
               "states": r.get("states"), "nnz": nonzeros.get((r["kind"], r["L"])),
               "build_s": r.get("build_s"), "quspin_build_s": q.get("build_s"),
               "ground_state_s": r.get("ground_state_s"),
               "quspin_ground_state_s": q.get("ground_state_s"),
               "total_s": r.get("total_s"), "quspin_total_s": q.get("total_s"),
               "peak_mb": r.get("peak_mb"), "quspin_peak_mb": q.get("peak_mb"),
               "matvecs": r.get("matvecs"), "quspin_matvecs": q.get("matvecs"),
               "error": r.get("error")}
        row["build_speedup"] = ratio(q.get("build_s"), r.get("build_s")) if ok else None
        row["total_speedup"] = ratio(q.get("total_s"), r.get("total_s")) if ok else None
        row["memory_fraction"] = ratio(r.get("peak_mb"), q.get("peak_mb")) if ok else None
        if ok and q.get("energies"):
            row["energy_difference"] = max(abs(a - b) for a, b in zip(r["energies"], q["energies"]))
        rows.append(row)
    return rows


def fmt(value, spec):
    if value is None:
        return "-"
    return format(value, spec)


def print_table(rows: list[dict]) -> None:
    header = (f"{'model':<10} {'L':>3} {'states':>10} {'nnz':>11} {'variant':<12} "
              f"{'build s':>8} {'QuSpin':>8} {'x':>5} {'gs s':>8} {'QuSpin':>8} "
              f"{'total x':>7} {'MVs':>4} {'peak MB':>8} {'QuSpin':>8} {'mem':>5} {'dE':>8}")
    print(header)
    print("-" * len(header))
    for r in rows:
        if r["error"]:
            print(f"{r['model']:<10} {r['L']:>3} {'':>10} {'':>11} {r['variant']:<12} "
                  f"error: {r['error']}")
            continue
        print(f"{r['model']:<10} {r['L']:>3} {r['states']:>10,} {fmt(r['nnz'], ',d'):>11} "
              f"{r['variant']:<12} {fmt(r['build_s'], '.2f'):>8} "
              f"{fmt(r['quspin_build_s'], '.2f'):>8} {fmt(r['build_speedup'], '.2f'):>5} "
              f"{fmt(r['ground_state_s'], '.2f'):>8} {fmt(r['quspin_ground_state_s'], '.2f'):>8} "
              f"{fmt(r['total_speedup'], '.2f'):>7} {fmt(r['matvecs'], 'd'):>4} "
              f"{fmt(r['peak_mb'], '.0f'):>8} {fmt(r['quspin_peak_mb'], '.0f'):>8} "
              f"{fmt(r['memory_fraction'], '.2f'):>5} {fmt(r.get('energy_difference'), '.1e'):>8}")
    print("x = QuSpin time / lowfold time (build; whole run); mem = lowfold peak / QuSpin "
          "peak; dE = max |E_lowfold - E_QuSpin|")


def goals(rows: list[dict], results: list[dict]) -> list[dict]:
    """The issue's targets, checked on this run's ratios."""
    checks = []
    for r in rows:
        if r["error"] or r["quspin_total_s"] is None:
            continue
        if r["variant"].startswith("csr") and (r["model"], r["L"]) in (("hubbard", 12),
                                                                       ("heisenberg", 24)):
            checks.append({"goal": f"{r['model']} L={r['L']} CSR build >= 2x faster than QuSpin",
                           "variant": r["variant"], "value": r["build_speedup"],
                           "met": r["build_speedup"] >= 2})
        if (r["model"], r["L"]) == ("hubbard", 12):
            checks.append({"goal": "hubbard L=12 whole run >= 3x faster than QuSpin + eigsh",
                           "variant": r["variant"], "value": r["total_speedup"],
                           "met": r["total_speedup"] >= 3})
            checks.append({"goal": "hubbard L=12 peak memory <= 0.5 x QuSpin + eigsh",
                           "variant": r["variant"], "value": r["memory_fraction"],
                           "met": r["memory_fraction"] <= 0.5})
    for r in results:
        if r["kind"] == "hubbard" and r["L"] == 14 and r["tool"] == "lowfold":
            ok = "error" not in r
            checks.append({"goal": "hubbard L=14 matrix-free in < 600 s and < 8 GB",
                           "variant": r["variant"],
                           "value": [r.get("total_s"), r.get("peak_mb")] if ok else r["error"],
                           "met": ok and r["total_s"] < 600 and r["peak_mb"] < 8192})
    return checks


def print_goals(checks: list[dict]) -> None:
    for c in checks:
        value = c["value"]
        shown = (f"{value:.2f}" if isinstance(value, float)
                 else f"{value[0]:.0f} s, {value[1]:.0f} MB" if isinstance(value, list)
                 else str(value))
        print(f"{'met' if c['met'] else 'NOT met':<8} {c['goal']} [{c['variant']}: {shown}]")


def child_environment(threads: int, blas_threads: int) -> dict:
    env = dict(os.environ)
    for name in THREAD_VARIABLES:
        env[name] = str(threads)
    for name in BLAS_VARIABLES:
        env[name] = str(blas_threads)
    return env


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--quick", action="store_true", help="smallest sizes only")
    parser.add_argument("--sizes", nargs="+", metavar="MODEL=L,L",
                        help="sizes per model, e.g. hubbard=8,10 heisenberg=16 ('none': only "
                             "--l14)")
    parser.add_argument("--skip-quspin", action="store_true", help="lowfold only")
    parser.add_argument("--l14", action="store_true",
                        help="also the L = 14 Hubbard ring (11.8 M states), matrix-free")
    parser.add_argument("--variants", default=",".join(VARIANTS),
                        help=f"comma-separated lowfold variants ({', '.join(VARIANTS)})")
    parser.add_argument("--route", default="auto", choices=("auto", "split", "mask", "general"),
                        help="lowfold's build route (default: auto)")
    parser.add_argument("--levels", type=int, default=1, help="lowest levels to compute")
    parser.add_argument("--threads", type=int, default=os.cpu_count() or 1,
                        help="NUMBA_NUM_THREADS and OMP_NUM_THREADS of both tools")
    parser.add_argument("--blas-threads", type=int, default=None,
                        help="BLAS threads of both tools (default: --threads)")
    parser.add_argument("--mf-max-states", type=int, default=1_000_000,
                        help="skip matrix-free variants above this many states")
    parser.add_argument("--timeout", type=float, default=3600.0, help="seconds per child")
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args(argv)

    if args.child:
        print(json.dumps(child(json.loads(args.child))), flush=True)
        return 0

    variants = [v for v in args.variants.split(",") if v]
    unknown = set(variants) - set(VARIANTS)
    if unknown:
        parser.error(f"unknown variants {sorted(unknown)}; choose from {VARIANTS}")
    sizes = QUICK if args.quick else SIZES
    if args.sizes:
        sizes = parse_sizes(args.sizes)
    blas_threads = args.threads if args.blas_threads is None else args.blas_threads
    env = child_environment(args.threads, blas_threads)
    tasks = []
    for kind, Ls in sizes.items():
        for L in Ls:
            tasks += tasks_for(kind, L, variants, quspin=not args.skip_quspin,
                               levels=args.levels, seed=args.seed,
                               mf_max_states=args.mf_max_states, route=args.route)
    if args.l14:
        tasks += tasks_for("hubbard", 14, ["mf-lanczos"], quspin=False, levels=args.levels,
                           seed=args.seed, mf_max_states=10**9, route=args.route)
    results = []
    for task in tasks:
        print(f"... {task['kind']} L={task['L']} {task['variant']}", file=sys.stderr, flush=True)
        results.append(run_child(task, env, args.timeout))
        if "error" in results[-1]:
            print(f"    {results[-1]['error']}", file=sys.stderr, flush=True)
    rows = summarise(results)
    print_table(rows)
    checks = goals(rows, results)
    print_goals(checks)
    report = {
        "settings": {"threads": args.threads, "blas_threads": blas_threads,
                     "hubbard_U": HUBBARD_U, "levels": args.levels, "seed": args.seed,
                     "route": args.route,
                     "variants": variants, "sizes": {k: list(v) for k, v in sizes.items()},
                     "l14": args.l14},
        "machine": {"cpus": os.cpu_count(), "platform": platform.platform(),
                    "python": platform.python_version()},
        "date": time.strftime("%Y-%m-%dT%H:%M:%S"),
        "rows": rows,
        "goals": checks,
        "measurements": results,
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(report, indent=2))
    print(f"wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
