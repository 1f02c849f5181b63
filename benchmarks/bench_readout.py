"""Local-operator readout of a t-J manifold: time and memory against the number of sites.

The manifold is the whole product {0, u, d}^L (every particle number, 3^L states; 531,441 at
L = 12) of an open electron chain.  Its effective Hamiltonian is built here from known
couplings (the second-order t-J model of the large-U Hubbard chain, t = 1, U = 20:
hopping t at order 1, exchange J = 4 t^2/U and three-site J/4 at order 2), so that only the
readout is timed: finding the per-site state sets (``product_manifold``), projecting onto the
strings (``strings_of_orders``) and naming them (``name_strings``).  The readout must return
the couplings it was built from (``recovered``, largest deviation).

Every size runs in its own subprocess; its peak memory is that child's ``ru_maxrss`` (read
with ``os.wait4``), which includes building the matrices.  The machines are shared and noisy:
compare sizes within one run, and the CPU time of the readout (``readout_cpu_s``,
``time.process_time`` in the child), which the load of other processes inflates far less
than the wall time.  Results go to ``benchmarks/results/bench_readout.json``.

Usage::

    python benchmarks/bench_readout.py               # L = 8, 10, 12
    python benchmarks/bench_readout.py --sizes 8     # one size
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
DEFAULT_OUT = HERE / "results" / "bench_readout.json"
SIZES = (8, 10, 12)
T, U = 1.0, 20.0


def _child(n_sites: int) -> dict:
    import numpy as np

    from lowfold.model.modelfile import parse_model
    from lowfold.readout.local_basis import product_manifold
    from lowfold.readout.local_names import coupling_strings, name_strings
    from lowfold.readout.local_strings import matrix_of_strings, strings_of_orders

    model = parse_model({"lattice": {"shape": "chain", "size": [n_sites]},
                         "site": {"type": "electron"}, "parameters": {"t": T, "U": U},
                         "term": [{"type": "hopping", "strength": "t"},
                                  {"type": "hubbard", "strength": "U"}]})
    codes = np.indices((3,) * n_sites).reshape(n_sites, -1).T        # 0 empty, 1 up, 2 down
    weights = 1 << np.arange(n_sites, dtype=np.int64)
    states = np.sort(((codes == 1) @ weights) + (((codes == 2) @ weights) << n_sites))
    start, cpu_detect = time.perf_counter(), time.process_time()
    basis, reason = product_manifold(model, states)
    detect = time.perf_counter() - start
    cpu_detect = time.process_time() - cpu_detect
    assert basis is not None, reason
    j = 4 * T**2 / U
    wanted = {("hopping", (i, i + 1)): (1, T) for i in range(n_sites - 1)}
    wanted |= {("exchange", (i, i + 1)): (2, j) for i in range(n_sites - 1)}
    wanted |= {("three-site", (i, i + 1, i + 2)): (2, j / 4) for i in range(n_sites - 2)}
    start = time.perf_counter()
    per_order = [{}, {}, {}]
    for (kind, sites), (order, value) in wanted.items():
        for key, c in coupling_strings(model, basis, kind, sites).items():
            per_order[order][key] = per_order[order].get(key, 0.0) + value * c
    orders = [matrix_of_strings(basis, strings) for strings in per_order]
    build = time.perf_counter() - start
    start, cpu = time.perf_counter(), time.process_time()
    strings = strings_of_orders(basis, orders)
    project = time.perf_counter() - start
    start = time.perf_counter()
    couplings, residual = name_strings(model, basis, strings, len(orders))
    name = time.perf_counter() - start
    cpu = time.process_time() - cpu
    found = {(c.kind, tuple(c.sites)): c.orders for c in couplings}
    deviation = max(abs(found.get(key, {}).get(order, 0.0) - value)
                    for key, (order, value) in wanted.items())
    extra = len(found) - len(wanted)
    return {"sites": n_sites, "states": int(states.size),
            "nonzeros": int(sum(h.nnz for h in orders)), "strings": len(strings),
            "couplings": len(couplings), "unexpected_couplings": extra,
            "residual_strings": len(residual), "max_deviation": float(deviation),
            "build_s": build, "detect_s": detect, "project_s": project, "name_s": name,
            "readout_s": detect + project + name, "readout_cpu_s": cpu_detect + cpu}


def _run(n_sites: int) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    proc = subprocess.Popen([sys.executable, __file__, "--child", str(n_sites)],
                            stdout=subprocess.PIPE, env=env, text=True)
    out = proc.stdout.read()
    _, status, usage = os.wait4(proc.pid, 0)
    if status:
        raise SystemExit(f"L = {n_sites}: the child failed (status {status})")
    result = json.loads(out)
    result["peak_rss_mb"] = usage.ru_maxrss / 1024
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=lambda s: [int(x) for x in s.split(",")], default=SIZES)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    parser.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(_child(args.child)))
        return
    rows = [_run(n) for n in args.sizes]
    load = os.getloadavg()[0]
    head = ("L", "states", "nonzeros", "strings", "detect s", "project s", "name s",
            "readout s", "readout cpu s", "peak MB", "max dev")
    print(" | ".join(head))
    for r in rows:
        print(" | ".join([str(r["sites"]), f"{r['states']:,}", f"{r['nonzeros']:,}",
                          str(r["strings"]), f"{r['detect_s']:.2f}", f"{r['project_s']:.2f}",
                          f"{r['name_s']:.2f}", f"{r['readout_s']:.2f}",
                          f"{r['readout_cpu_s']:.2f}",
                          f"{r['peak_rss_mb']:.0f}", f"{r['max_deviation']:.1e}"]))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"machine": platform.platform(), "python": sys.version,
                                    "load_average_at_start": load, "t": T, "U": U,
                                    "results": rows}, indent=2))
    print(f"load average (1 min) at the start: {load:.1f}; wall times grow with it, CPU times "
          "much less")
    print(f"written {args.out}")


if __name__ == "__main__":
    main()
