"""The t-J model of infinite lattices: linked clusters read out in local operators, by order.

Model: the Hubbard model with H0 = U n_up n_dn alone and ``[perturbation] filling = "mixed"``
(the manifold {0, u, d} on every site), V = nearest-neighbour hopping t, t = 1, U = 10, on
the infinite chain and square lattices; ``lowfold.jobs.lattice.derive_infinite`` without the
exact check (the linked-cluster sum of X-operator strings and the readout of classes).

Per lattice and order: clusters per unit cell, distinct graphs computed, wall and CPU
seconds (numba compilation warmed up first on the chain at order 2), the named classes and
the ``string`` classes.  A lattice stops at the first order above ``--timeout`` seconds
(default 120).  Results go to ``benchmarks/results/bench_lattice_tj.json``.

Usage::

    python benchmarks/bench_lattice_tj.py                  # orders 2 to 6
    python benchmarks/bench_lattice_tj.py --orders 2 4
"""

from __future__ import annotations

import argparse
import json
import platform
import time
import tomllib
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_lattice_tj.json"
SHAPES = ("chain", "square")

MODEL = """
[lattice]
shape = "{shape}"
boundary = "infinite"
[site]
type = "electron"
[parameters]
t = 1.0
U = 10.0
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["U"]
order = 2
filling = "mixed"
"""


def measure(shape: str, order: int) -> dict:
    import lowfold
    from lowfold.jobs.lattice import derive_infinite
    model = lowfold.parse_model(tomllib.loads(MODEL.format(shape=shape)))
    wall, cpu = time.perf_counter(), time.process_time()
    result = derive_infinite(model, order)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    note = result.warnings[0].split(", ")
    strings = sum(c.kind == "string" for c in result.classes)
    return {"shape": shape, "order": order,
            "clusters": int(note[1].split()[0]), "distinct": int(note[2].split()[0]),
            "seconds": round(wall, 3), "cpu_s": round(cpu, 3),
            "named_classes": len(result.classes) - strings, "string_classes": strings}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--orders", type=int, nargs="+", default=[2, 3, 4, 5, 6])
    parser.add_argument("--timeout", type=float, default=120.0)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args()
    measure("chain", 2)                                  # numba compilation
    rows = []
    header = f"{'lattice':8} {'order':>5} {'clusters':>8} {'distinct':>8} {'seconds':>8} " \
             f"{'cpu_s':>7} {'named':>6} {'strings':>8}"
    print(header)
    for shape in SHAPES:
        for order in args.orders:
            row = measure(shape, order)
            rows.append(row)
            print(f"{shape:8} {order:5d} {row['clusters']:8d} {row['distinct']:8d} "
                  f"{row['seconds']:8.2f} {row['cpu_s']:7.2f} {row['named_classes']:6d} "
                  f"{row['string_classes']:8d}", flush=True)
            if row["seconds"] > args.timeout:
                break
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"machine": platform.platform(), "rows": rows}, indent=1))
    print(f"written {args.out}")


if __name__ == "__main__":
    main()
