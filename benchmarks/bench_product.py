"""Ground states of half-filled Hubbard clusters in the product basis, against QuSpin.

Models (t = 1, U = 4, N_up = N_dn = L/2, S^z = 0):

* periodic rings of L = 12, 14, 16 sites (853,776; 11,778,624; 165,636,900 states);
* the 4 x 4 periodic square cluster (165,636,900 states).

Variants, each measured in its own subprocess (peak memory = ``ru_maxrss`` of that child,
read with ``os.wait4``); in each child the same code first runs on an 8-site ring, so numba
compile time and lazy imports are not counted:

* ``product``: what ``lowfold.spectrum(model, levels=1)`` runs for these models (the route
  ``"auto"`` picks the product basis, ``lowfold.build.product_basis``, and the two-vector
  Lanczos of ``lowfold.solve.product_lanczos``): the build (one-species matrices and the
  diagonal) and the Lanczos timed apart, with the Lanczos steps;
* ``quspin``: QuSpin (P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017)):
  ``spinful_fermion_basis_1d`` and ``hamiltonian`` (checks off), then
  ``scipy.sparse.linalg.eigsh`` on its CSR matrix (k = 1, which = "SA", ncv = 20, tol = 0,
  as ``benchmarks/bench_build.py``); rings of 12 and 14 sites only (the 16-site matrix does
  not fit in memory).

Rings also get the Bethe-ansatz ground-state energy of the same finite ring (Lieb & Wu, PRL
20, 1445 (1968), solved by ``tests/helpers/bethe_ansatz.py``, as the tests do): column
``dE BA`` is lowfold's energy minus it.  Goals (issue: scale): 16 sites in under 10 minutes and
8 GB, 14 sites in under a minute.

Both tools get the same thread settings.  The machine is shared and noisy: compare the
ratios of one run, not times across runs.  Results go to
``benchmarks/results/bench_product.json``.

Usage::

    python benchmarks/bench_product.py                   # 12 and 14 sites, with QuSpin
    python benchmarks/bench_product.py --sixteen         # also the 16-site ring and 4 x 4
    python benchmarks/bench_product.py --only ring16 square4x4 --skip-quspin
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
DEFAULT_OUT = HERE / "results" / "bench_product.json"
HUBBARD_U = 4.0
CLUSTERS = {"ring12": ("chain", [12]), "ring14": ("chain", [14]), "ring16": ("chain", [16]),
            "square4x4": ("square", [4, 4])}
QUSPIN_CLUSTERS = ("ring12", "ring14")


def lowfold_model(shape: str, size: list):
    import lowfold

    n = 1
    for s in size:
        n *= s
    spec = {
        "title": f"Hubbard {shape} {'x'.join(map(str, size))}, half filling",
        "lattice": {"shape": shape, "size": size, "boundary": "periodic"},
        "site": {"type": "electron"},
        "sector": {"particles": n, "sz": 0},
        "parameters": {"t": 1.0, "U": HUBBARD_U},
        "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
                 {"type": "hubbard", "strength": "U"}],
    }
    return lowfold.parse_model(spec, source="<bench_product>")


def run_product(shape: str, size: list) -> dict:
    """The product route, as ``lowfold.spectrum(model, levels=1)`` takes it (checked with
    ``wants_product``), timed in its two stages."""
    from lowfold.build.product_basis import ProductHamiltonian
    from lowfold.solve.method import wants_product
    from lowfold.solve.product_lanczos import product_lowest

    model = lowfold_model(shape, size)
    if not wants_product(model, "auto"):
        raise SystemExit("the auto route does not take the product basis for this model")
    start, cpu = time.perf_counter(), time.process_time()
    hamiltonian = ProductHamiltonian.of(model)
    built = time.perf_counter()
    found = product_lowest(hamiltonian, 1)
    done = time.perf_counter()
    return {"states": hamiltonian.size, "method": "product", "total_s": done - start,
            "cpu_s": time.process_time() - cpu,
            "build_s": built - start, "ground_state_s": done - built,
            "steps": int(found.steps[0]), "matvecs": int(found.matvecs),
            "energies": [float(e) for e in found.energies]}


def run_quspin(L: int) -> dict:
    import numpy as np
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian
    from scipy.sparse.linalg import eigsh

    start, cpu = time.perf_counter(), time.process_time()
    bonds = [(i, (i + 1) % L) for i in range(L)]
    basis = spinful_fermion_basis_1d(L, Nf=(L // 2, L // 2))
    hop = [[-1.0, i, j] for i, j in bonds] + [[-1.0, j, i] for i, j in bonds]
    static = [["+-|", hop], ["|+-", hop], ["n|n", [[HUBBARD_U, i, i] for i in range(L)]]]
    matrix = hamiltonian(static, [], basis=basis, dtype=np.float64, check_herm=False,
                         check_pcon=False, check_symm=False).tocsr()
    built = time.perf_counter()
    v0 = np.random.default_rng(5).standard_normal(matrix.shape[0])
    energies = eigsh(matrix, k=1, which="SA", v0=v0, ncv=20, tol=0, return_eigenvectors=False)
    done = time.perf_counter()
    return {"states": int(basis.Ns), "nnz": int(matrix.nnz), "total_s": done - start,
            "cpu_s": time.process_time() - cpu,
            "build_s": built - start, "ground_state_s": done - built,
            "energies": [float(e) for e in energies]}


def child(task: dict) -> dict:
    if task["tool"] == "quspin":
        run_quspin(8)                                   # warm-up, not counted
        return run_quspin(CLUSTERS[task["cluster"]][1][0])
    run_product("chain", [8])                           # warm-up: numba cache, imports
    return run_product(*CLUSTERS[task["cluster"]])


def run_child(task: dict, env: dict, timeout: float) -> dict:
    """Run one task in a fresh interpreter; add its peak memory (``ru_maxrss``)."""
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
                os.wait4(proc.pid, 0)
                return dict(task, error=f"timed out after {timeout:.0f} s")
            time.sleep(0.2)
        code = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        lines = [line for line in out.read().splitlines() if line.startswith("{")]
        if code != 0 or not lines:
            tail = err.read().strip().splitlines()[-3:]
            return dict(task, error=f"exit {code}: {' | '.join(tail)}")
    return dict(task, **json.loads(lines[-1]), peak_mb=usage.ru_maxrss / 1024,
                load=os.getloadavg()[0])


def summarise(results: list[dict]) -> list[dict]:
    """One row per cluster: lowfold's product route with QuSpin beside it where run."""
    quspin = {r["cluster"]: r for r in results if r["tool"] == "quspin" and "error" not in r}
    rows = []
    for r in results:
        if r["tool"] != "lowfold":
            continue
        q = quspin.get(r["cluster"], {})
        row = {"cluster": r["cluster"], "states": r.get("states"), "error": r.get("error"),
               "total_s": r.get("total_s"), "cpu_s": r.get("cpu_s"), "build_s": r.get("build_s"),
               "ground_state_s": r.get("ground_state_s"), "steps": r.get("steps"),
               "peak_mb": r.get("peak_mb"), "energy": (r.get("energies") or [None])[0],
               "quspin_total_s": q.get("total_s"), "quspin_cpu_s": q.get("cpu_s"),
               "quspin_peak_mb": q.get("peak_mb"), "load": r.get("load"),
               "quspin_error": next((x.get("error") for x in results if x["tool"] == "quspin"
                                     and x["cluster"] == r["cluster"] and "error" in x), None)}
        row["speedup"] = (q["total_s"] / r["total_s"]) if q and r.get("total_s") else None
        row["cpu_speedup"] = (q["cpu_s"] / r["cpu_s"]) if q.get("cpu_s") and r.get("cpu_s") else None
        row["energy_difference"] = (abs(q["energies"][0] - row["energy"])
                                    if q and row["energy"] is not None else None)
        row["bethe_difference"] = _bethe_difference(r["cluster"], row["energy"])
        rows.append(row)
    return rows


def _bethe_difference(cluster: str, energy) -> float | None:
    """lowfold's energy minus the Lieb-Wu energy of the finite ring (rings only)."""
    shape, size = CLUSTERS[cluster]
    if shape != "chain" or energy is None:
        return None
    sys.path.insert(0, str(HERE.parent / "tests"))
    from helpers.bethe_ansatz import lieb_wu_energy

    L = size[0]
    return energy - lieb_wu_energy(L, L, L // 2, HUBBARD_U)


def fmt(value, spec):
    return "-" if value is None else format(value, spec)


def print_table(rows: list[dict]) -> None:
    header = (f"{'cluster':<10} {'states':>12} {'total s':>8} {'CPU s':>8} {'build s':>8} "
              f"{'Lanczos s':>9} {'steps':>5} {'peak MB':>8} {'QuSpin s':>9} {'CPU s':>8} "
              f"{'QuSpin MB':>9} {'x':>6} {'x CPU':>6} {'dE':>8} {'dE BA':>8} {'load':>5}  "
              f"{'E0':>16}")
    print(header)
    print("-" * len(header))
    for r in rows:
        if r["error"]:
            print(f"{r['cluster']:<10} error: {r['error']}")
            continue
        print(f"{r['cluster']:<10} {r['states']:>12,} {fmt(r['total_s'], '.2f'):>8} "
              f"{fmt(r['cpu_s'], '.2f'):>8} {fmt(r['build_s'], '.2f'):>8} "
              f"{fmt(r['ground_state_s'], '.2f'):>9} {fmt(r['steps'], 'd'):>5} "
              f"{fmt(r['peak_mb'], '.0f'):>8} {fmt(r['quspin_total_s'], '.2f'):>9} "
              f"{fmt(r['quspin_cpu_s'], '.2f'):>8} {fmt(r['quspin_peak_mb'], '.0f'):>9} "
              f"{fmt(r['speedup'], '.2f'):>6} {fmt(r['cpu_speedup'], '.2f'):>6} "
              f"{fmt(r['energy_difference'], '.1e'):>8} {fmt(r['bethe_difference'], '.1e'):>8} "
              f"{fmt(r['load'], '.1f'):>5}"
              f"  {fmt(r['energy'], '.10f'):>16}")
        if r["quspin_error"]:
            print(f"{'':<10} QuSpin: {r['quspin_error']}")
    print("CPU s: process time of all threads (the machine is shared: wall time / CPU time "
          "shows the contention; load: 1-min load average after the run)")
    print("total s: build + Lanczos of the product route (lowfold.spectrum's auto route); x = QuSpin total / lowfold total "
          "(same run); peak MB: ru_maxrss of the child")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sixteen", action="store_true", help="also the 16-site clusters")
    parser.add_argument("--only", nargs="+", choices=sorted(CLUSTERS), help="these clusters")
    parser.add_argument("--skip-quspin", action="store_true")
    parser.add_argument("--threads", type=int, default=2)
    parser.add_argument("--timeout", type=float, default=3600.0)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(json.loads(args.child))))
        return 0
    clusters = args.only or ["ring12", "ring14"] + (["ring16", "square4x4"] if args.sixteen else [])
    env = dict(os.environ, NUMBA_NUM_THREADS=str(args.threads), OMP_NUM_THREADS=str(args.threads),
               OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    results = []
    for cluster in clusters:
        tasks = [{"tool": "lowfold", "cluster": cluster}]
        if cluster in QUSPIN_CLUSTERS and not args.skip_quspin:
            tasks.append({"tool": "quspin", "cluster": cluster})
        for task in tasks:
            print(f"running {task['tool']} {cluster} ...", file=sys.stderr, flush=True)
            results.append(run_child(task, env, args.timeout))
    rows = summarise(results)
    print_table(rows)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"machine": platform.platform(), "cpus": os.cpu_count(),
                                    "threads": args.threads, "hubbard_U": HUBBARD_U,
                                    "rows": rows, "runs": results}, indent=2))
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
