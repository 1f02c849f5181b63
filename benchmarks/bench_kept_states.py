"""Models on kept local states: time to enumerate the kept basis, compile and build H.

The model is the t-J model with the three-site term on an open square cluster, written as
``lowfold derive --export`` writes it (``[site] states = ["0", "u", "d"]``, ``hopping``,
``exchange`` with its density part, ``three-site``), with two holes and the smallest
S^z >= 0.  Timed:
the site-by-site enumeration of the kept states (``build_basis``), the compilation of the
terms with the projection onto the kept states (``compile_operator``) and the CSR matrix.
The kept basis must have ``C(L, L-2) * C(L-2, N_up)`` states (``states_ok``).  Shared,
noisy machines: compare sizes within one run.  Results go to
``benchmarks/results/bench_kept_states.json``.

Usage::

    python benchmarks/bench_kept_states.py                  # 3x3 ... 4x4
    python benchmarks/bench_kept_states.py --sizes 3,3
"""

from __future__ import annotations

import argparse
import json
import platform
import time
from math import comb
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results" / "bench_kept_states.json"
SIZES = ((3, 3), (4, 3), (4, 4))
T, J = 1.0, 0.2


def _model(lx: int, ly: int):
    from lowfold.model.modelfile import parse_model
    n = lx * ly
    return parse_model({
        "lattice": {"shape": "square", "size": [lx, ly], "boundary": "open"},
        "site": {"type": "electron", "states": ["0", "u", "d"]},
        "sector": {"particles": n - 2, "sz": ((n - 2) % 2) / 2},
        "term": [{"type": "hopping", "strength": T}, {"type": "exchange", "strength": J},
                 {"type": "interaction", "strength": -J / 4, "label": "density"},
                 {"type": "three-site", "strength": J / 4}]})


def _run(lx: int, ly: int) -> dict:
    from lowfold.build.compiled import compile_operator
    from lowfold.build.hamiltonian import Hamiltonian, build_basis
    model = _model(lx, ly)
    n = lx * ly
    start = time.perf_counter()
    basis = build_basis(model)
    enumerate_s = time.perf_counter() - start
    start = time.perf_counter()
    operator = compile_operator(model)
    compile_s = time.perf_counter() - start
    start = time.perf_counter()
    matrix = Hamiltonian(model, basis, operator).to_csr()
    csr_s = time.perf_counter() - start
    expected = comb(n, n - 2) * comb(n - 2, (n - 1) // 2)    # N_up = N_dn or N_dn + 1
    return {"size": f"{lx}x{ly}", "states": basis.size, "states_ok": basis.size == expected,
            "strings": operator.n_strings, "nnz": int(matrix.nnz),
            "enumerate_s": round(enumerate_s, 3), "compile_s": round(compile_s, 3),
            "csr_s": round(csr_s, 3)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="*", help="clusters as LX,LY (default: 3,3 4,3 4,4)")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    args = parser.parse_args()
    sizes = [tuple(int(x) for x in s.split(",")) for s in args.sizes] if args.sizes else SIZES
    rows = [_run(*size) for size in sizes]
    keys = list(rows[0])
    print("  ".join(f"{k:>11}" for k in keys))
    for row in rows:
        print("  ".join(f"{str(row[k]):>11}" for k in keys))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps({"machine": platform.node(), "rows": rows}, indent=2) + "\n")


if __name__ == "__main__":
    main()
