"""What ``derive --exact-couplings`` costs beside the series: time and peak memory, same run.

Models: half-filled Hubbard clusters, t = 0.1, U = 1, H0 = U: open chains of 4, 6, 8, 10 sites
and open 2x2, 2x3 clusters, at order 4.  Each point runs ``derive(model, 4, compare_exact=False)``
with and without ``exact_couplings=True`` in its own subprocess (peak memory = ``ru_maxrss`` of
that child, via ``os.wait4``; the numba kernels are compiled on the dimer first), and reports the
largest S^z block (its sector states and manifold states: the exact route needs dim(P) + 1
eigenvectors of it, dense up to 3000 states, ARPACK above), the two times and memories, their
ratio, and the exact and order-4 exchange J(0,1).  The 10-site chain is listed as the size
the exact route refuses (SizeError before anything is built: a block of 14,400 states needs 121
eigenvectors, past the Lanczos work limit (dim(P)+1)^2 x states <= 1e8), with the time the
refusal takes.

The machines are shared and noisy: compare the ratios of one run, not times across runs.
Results go to ``benchmarks/results/bench_exact_couplings.json``.

Usage::

    python benchmarks/bench_exact_couplings.py            # everything (a few minutes)
    python benchmarks/bench_exact_couplings.py --quick    # chains of 4 and 6 sites only
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_exact_couplings.json"
POINTS = [("chain", [4]), ("chain", [6]), ("square", [2, 2]), ("square", [2, 3]),
          ("chain", [8]), ("chain", [10])]

CHILD = r"""
import json, sys, time
import numpy as np
from lowfold import parse_model
from lowfold.errors import SizeError
from lowfold.jobs.derive import derive
from lowfold.build.basis import sector_size
import tomllib

def model(shape, size):
    n = int(np.prod(size))
    return parse_model(tomllib.loads(f'''
[lattice]
shape = "{shape}"
size = {size}
boundary = "open"
[site]
type = "electron"
[sector]
particles = {n}
[parameters]
t = 0.1
U = 1.0
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
'''))

derive(model("chain", [2]), 4, compare_exact=False, exact_couplings=True)   # compile the kernels
shape, size, exact = sys.argv[1], json.loads(sys.argv[2]), sys.argv[3] == "1"
m = model(shape, size)
start = time.perf_counter()
out = {}
try:
    r = derive(m, 4, compare_exact=False, exact_couplings=exact)
    J = next(c for c in r.couplings if c.kind == "exchange" and c.sites == (0, 1))
    out["J_order4"] = J.value
    if exact:
        out["J_exact"] = r.exact.coupling_value("exchange", (0, 1))
except SizeError as exc:
    out["size_error"] = str(exc)
out["seconds"] = time.perf_counter() - start
print(json.dumps(out))
"""


def measure(shape, size, exact: bool, script: str) -> dict:
    proc = subprocess.Popen([sys.executable, script, shape, json.dumps(size), "1" if exact else "0"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    _, status, usage = os.wait4(proc.pid, 0)
    out, err = proc.stdout.read(), proc.stderr.read()
    if status != 0:
        return {"failed": err.strip().splitlines()[-1] if err.strip() else f"status {status}"}
    result = json.loads(out)
    result["peak_mb"] = usage.ru_maxrss / 1024
    return result


def largest_block(shape, size) -> dict:
    from math import comb, prod
    n = prod(size)
    up = n // 2
    return {"sector_states": comb(n, up) ** 2, "manifold_states": comb(n, up)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args()
    points = POINTS[:2] if args.quick else POINTS
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        script = Path(tmp) / "child.py"
        script.write_text(CHILD)
        print(f"{'cluster':>14} {'block':>16} {'series s':>9} {'exact s':>9} {'ratio':>6} "
              f"{'series MB':>9} {'exact MB':>9} {'J order 4':>11} {'J exact':>11}")
        for shape, size in points:
            series = measure(shape, size, False, script)
            exact = measure(shape, size, True, script)
            block = largest_block(shape, size)
            row = {"shape": shape, "size": size, "largest_block": block, "series": series,
                   "exact": exact}
            rows.append(row)
            name = f"{shape} {'x'.join(map(str, size))}"
            blk = f"{block['manifold_states']}/{block['sector_states']:,}"
            if "seconds" not in series or "seconds" not in exact:
                print(f"{name:>14} {blk:>16} failed: {series.get('failed') or exact.get('failed')}")
                continue
            if "size_error" in exact:
                print(f"{name:>14} {blk:>16} {series['seconds']:9.2f} {exact['seconds']:9.2f} "
                      f"{'':>6} {series['peak_mb']:9.0f} {exact['peak_mb']:9.0f}  SizeError")
                continue
            ratio = exact["seconds"] / series["seconds"]
            print(f"{name:>14} {blk:>16} {series['seconds']:9.2f} {exact['seconds']:9.2f} "
                  f"{ratio:6.1f} {series['peak_mb']:9.0f} {exact['peak_mb']:9.0f} "
                  f"{series['J_order4']:11.6g} {exact['J_exact']:11.6g}")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"points": rows}, indent=1))
    print(f"written to {args.out}")


if __name__ == "__main__":
    main()
