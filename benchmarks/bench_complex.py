"""Real against complex Hamiltonians: build and ground-state timings, in the same run.

One Hubbard cluster (periodic 10-site ring, U = 4, N_up = N_dn = 5: 63,504 states), three
ways:

* ``real``: plain numbers (float64 all the way);
* ``complex-form``: the same model written with ``{re = 1.0, im = 0.0}`` strengths -- must
  take the real route (float64) and cost the same;
* ``twisted``: a flux through the ring as Peierls phases on its bonds (complex128);
* ``spin-orbit``: ``soc = [0.2, 0, 0]`` on every bond, S^z not conserved (complex128, all
  N_up + N_dn = 10 states: 184,756).

Each measures the model parse, the Hamiltonian build (CSR) and the lowest eigenvalue
(lowfold's Lanczos), after a warm-up of the numba kernels on a small model of each kind.
The machines are shared: compare the ratios of one run, not times across runs.  Results go
to ``benchmarks/results/bench_complex.json``.

Usage::

    python benchmarks/bench_complex.py            # L = 10
    python benchmarks/bench_complex.py --sites 8  # quicker
"""

from __future__ import annotations

import argparse
import json
import math
import time
from pathlib import Path

import lowfold
from lowfold.build.hamiltonian import Hamiltonian
from lowfold.solve.lanczos import lanczos_lowest

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_complex.json"


def ring(sites: int, variant: str):
    hopping = {"type": "hopping", "strength": 1.0}
    sector = {"particles": sites, "sz": 0}
    if variant == "complex-form":
        hopping["strength"] = {"re": 1.0, "im": 0.0}
    elif variant == "twisted":
        hopping["bonds"] = [[(x + 1) % sites, x] for x in range(sites)]
        hopping["phases"] = [2 * math.pi * 0.3 / sites] * sites
    elif variant == "spin-orbit":
        hopping["soc"] = [0.2, 0.0, 0.0]
        sector = {"particles": sites}
    return lowfold.parse_model({
        "lattice": {"shape": "chain", "size": [sites], "boundary": "periodic"},
        "site": {"type": "electron"}, "sector": sector,
        "term": [hopping, {"type": "hubbard", "strength": 4.0}]})


def measure(sites: int, variant: str) -> dict:
    start = time.perf_counter()
    model = ring(sites, variant)
    parsed = time.perf_counter()
    h = Hamiltonian.of(model)
    matrix = h.to_csr()
    built = time.perf_counter()
    energy = float(lanczos_lowest(matrix, 1).energies[0])
    solved = time.perf_counter()
    return {"variant": variant, "sites": sites, "states": h.size, "dtype": str(h.dtype),
            "nnz": int(matrix.nnz), "parse_s": parsed - start, "build_s": built - parsed,
            "solve_s": solved - built, "energy": energy}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, default=10)
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args()
    variants = ("real", "complex-form", "twisted", "spin-orbit")
    for variant in variants:                     # compile the kernels for both dtypes
        measure(4, variant)
    rows = [measure(args.sites, variant) for variant in variants]
    base = rows[0]
    print(f"{'variant':<14}{'states':>10}{'dtype':>12}{'nnz':>12}{'build s':>10}"
          f"{'solve s':>10}{'build/real':>12}{'solve/real':>12}")
    for row in rows:
        row["build_ratio"] = row["build_s"] / base["build_s"]
        row["solve_ratio"] = row["solve_s"] / base["solve_s"]
        print(f"{row['variant']:<14}{row['states']:>10,}{row['dtype']:>12}{row['nnz']:>12,}"
              f"{row['build_s']:>10.3f}{row['solve_s']:>10.3f}{row['build_ratio']:>12.2f}"
              f"{row['solve_ratio']:>12.2f}")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"rows": rows}, indent=2) + "\n")
    print(f"written {args.out}")


if __name__ == "__main__":
    main()
