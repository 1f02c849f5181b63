"""Linked-cluster expansion of infinite lattices: work, time and peak memory by order.

Model: the half-filled Hubbard model, H0 = U n_up n_dn - (U/2) n (one-site terms; the
potential selects one electron per site), V = nearest-neighbour hopping t, t = 1, U = 10,
on the infinite chain, square, triangular and honeycomb lattices; ``lowfold.derive`` (the
linked-cluster sum and the readout of coupling classes) at orders 2, 4, 6.

Per lattice and order, in its own subprocess (standard library probe, one BLAS thread):

* ``subgraphs``: connected clusters enumerated per unit cell (single sites included);
* ``distinct``: distinct graphs whose effective Hamiltonian was computed (after pruning);
* ``seconds``: wall time of the sum and the readout (numba compilation warmed up first on
  the chain at order 2); ``cpu_s``: CPU time of the child over the same span (on a shared,
  loaded machine the wall time grows with the load, the CPU time much less);
* ``peak_mb``: peak resident memory of the child (``resource.getrusage(RUSAGE_SELF)``).

A lattice stops at the first order that exceeds ``--timeout`` seconds (default 150).
Results go to ``benchmarks/results/bench_lattice.json``.

Speed goals (issue 11): each lattice to order 6 in under 30 s; the chain to order 10 and the
square lattice to order 8 in under 10 minutes, under 2 GB.  ``--goals`` measures exactly
those (and marks each row ``ok`` or ``SLOW``).

Usage::

    python benchmarks/bench_lattice.py                  # orders 2, 4, 6
    python benchmarks/bench_lattice.py --orders 2 4     # fewer
    python benchmarks/bench_lattice.py --goals          # the speed goals
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_lattice.json"
SHAPES = ("chain", "square", "triangular", "honeycomb")

MODEL = """
[lattice]
shape = "{shape}"
boundary = "infinite"
[site]
type = "electron"
[parameters]
t = 1.0
U = 10.0
mu = -5.0
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

CHILD = """
import json, resource, sys, time, tomllib
import lowfold
from lowfold.jobs.lattice import linked_cluster_sum, read_classes
shape, order, text = sys.argv[1], int(sys.argv[2]), sys.argv[3]
lowfold.derive(lowfold.parse_model(tomllib.loads(text.format(shape="chain", order=2))))
model = lowfold.parse_model(tomllib.loads(text.format(shape=shape, order=order)))
start, cpu = time.perf_counter(), time.process_time()
run = linked_cluster_sum(model, order)
classes = read_classes(run, order, model)
seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"shape": shape, "order": order, "subgraphs": run.total.clusters,
                  "distinct": run.total.distinct, "classes": len(classes),
                  "seconds": seconds, "cpu_s": cpu, "peak_mb": peak}))
"""


def measure(shape: str, order: int, timeout: float) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    try:
        proc = subprocess.run([sys.executable, "-c", CHILD, shape, str(order), MODEL],
                              capture_output=True, text=True, timeout=timeout, env=env)
    except subprocess.TimeoutExpired:
        return {"shape": shape, "order": order, "error": f"over {timeout:g} s"}
    if proc.returncode != 0:
        return {"shape": shape, "order": order,
                "error": (proc.stderr.strip().splitlines() or ["failed"])[-1]}
    return json.loads(proc.stdout.strip().splitlines()[-1])


GOALS = [(shape, 6, 30.0) for shape in SHAPES] + [("chain", 10, 600.0), ("square", 8, 600.0)]
GOAL_MB = 2048


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--orders", type=int, nargs="+", default=[2, 4, 6])
    parser.add_argument("--shapes", nargs="+", default=list(SHAPES))
    parser.add_argument("--timeout", type=float, default=150.0)
    parser.add_argument("--goals", action="store_true", help="measure the speed goals only")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args()
    plan = ([(shape, order, limit) for shape, order, limit in GOALS] if args.goals else
            [(shape, order, None) for shape in args.shapes for order in args.orders])
    rows = []
    print(f"{'lattice':<11} {'order':>5} {'subgraphs':>10} {'distinct':>9} {'classes':>8} "
          f"{'seconds':>9} {'cpu s':>8} {'peak MB':>8}" + ("  goal" if args.goals else ""))
    stopped = set()
    for shape, order, limit in plan:
        if shape in stopped:
            continue
        row = measure(shape, order, max(args.timeout, 2 * (limit or 0)))
        rows.append(row)
        if "error" in row:
            print(f"{shape:<11} {order:>5} {row['error']}", flush=True)
            stopped.add(shape)
            continue
        verdict = ""
        if limit is not None:
            row["goal_s"] = limit
            good = row["seconds"] < limit and row["peak_mb"] < GOAL_MB
            verdict = f"  {'ok' if good else 'SLOW'} (< {limit:g} s)"
        print(f"{shape:<11} {order:>5} {row['subgraphs']:>10,} {row['distinct']:>9} "
              f"{row['classes']:>8} {row['seconds']:>9.2f} {row['cpu_s']:>8.2f} "
              f"{row['peak_mb']:>8.0f}{verdict}", flush=True)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"machine": platform.platform(), "cpus": os.cpu_count(),
                                    "load": os.getloadavg()[0],
                                    "date": time.strftime("%Y-%m-%d %H:%M:%S"),
                                    "model": "half-filled Hubbard, t = 1, U = 10",
                                    "rows": rows}, indent=1) + "\n")
    print(f"written to {args.out}")


if __name__ == "__main__":
    main()
