"""Time and peak memory of ``lowfold.derive`` against the non-perturbative route, same run.

Models: half-filled Hubbard clusters, t = 0.1, U = 1, H0 = U (``[perturbation] unperturbed =
["hubbard"]``): open chains L = 4, 6, ..., 16 and open 2x2, 2x3, 3x3, 3x4, 4x4 clusters at
orders 2, 4 and 6, and the periodic 4x4 cluster (65,536-state manifold) at order 2.

Every measurement runs in its own subprocess, so its peak memory (``ru_maxrss`` of that child,
read with ``os.wait4``) belongs to it alone; its address space is capped (``--memory-gb``,
default 80 % of the machine) so that a point that outgrows the machine fails alone with a
MemoryError; inside a child the numba kernels first run on the Hubbard dimer, so compile time
is not counted.  Kinds of measurement:

* ``derive``: ``derive(model, n, compare_exact=False)`` (the ``--no-check`` path);
* ``derive+check``: ``derive(model, n, compare_exact=True)`` at order 4, the same work plus the exact
  check (the check's cost hardly depends on n: it is the exact lowest levels of every S^z
  block);
* ``exact``: the non-perturbative route: per S^z block the dense sector matrix, its full
  diagonalisation and the exact effective Hamiltonian by direct rotation
  (``lowfold.perturbation.schrieffer_wolff.exact_effective_hamiltonian``), for clusters whose
  largest block has at most ``--dense-limit`` states.

Each reports the nearest-neighbour exchange J(0,1): from derive's readout (sum of the orders),
and from the exact effective Hamiltonian as ``4 c(Z0 Z1) = 4 tr(H_eff Z0 Z1) / 2^N`` (with
SU(2) symmetry the isotropic J; diagonal elements, so no fermion reordering sign enters).
Sizes of a series stop after the first time-out or size error.

The machines are shared and noisy: compare the ratios of one run, not times across runs.
Results go to ``benchmarks/results/bench_derive.json``.

Usage::

    python benchmarks/bench_derive.py                  # everything (about half an hour)
    python benchmarks/bench_derive.py --quick          # small clusters and the two goals
    python benchmarks/bench_derive.py --limit 300      # seconds per measurement
    python benchmarks/bench_derive.py --profile "square 3x3 open 4 check"
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
DEFAULT_OUT = HERE / "results" / "bench_derive.json"
T, U = 0.1, 1.0
CHAINS = (4, 6, 8, 10, 12, 14, 16)
CLUSTERS = ((2, 2), (2, 3), (3, 3), (3, 4), (4, 4))
ORDERS = (2, 4, 6)
GOALS = [
    {"goal": "2nd order, 4x4 periodic, 65,536-state manifold, under 60 s",
     "shape": "square", "size": [4, 4], "boundary": "periodic", "order": 2, "seconds": 60},
    {"goal": "4th order, 3x3 open, under 30 s",
     "shape": "square", "size": [3, 3], "boundary": "open", "order": 4, "seconds": 30},
]


# --------------------------------------------------------------------------- child side

def hubbard(shape: str, size: list, boundary: str, order: int):
    import lowfold

    n_sites = 1
    for s in size:
        n_sites *= s
    spec = {
        "title": f"half-filled Hubbard {shape} {size} {boundary}",
        "lattice": {"shape": shape, "size": list(size), "boundary": boundary},
        "site": {"type": "electron"},
        "sector": {"particles": n_sites},
        "parameters": {"t": T, "U": U},
        "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": order},
    }
    return lowfold.parse_model(spec)


def warm_up() -> None:
    """Compile / load every kernel derive and the check use, on the Hubbard dimer."""
    from lowfold.jobs.derive import derive

    for order in (2, 4):
        derive(hubbard("chain", [2], "open", order), order, compare_exact=True)


def nearest_exchange(result) -> float | None:
    for c in result.couplings:
        if c.kind == "exchange" and tuple(c.sites) == (0, 1):
            return float(sum(c.orders.values()))
    return None


def run_derive(task: dict) -> dict:
    from lowfold.jobs.derive import derive

    model = hubbard(task["shape"], task["size"], task["boundary"], task["order"])
    start = time.perf_counter()
    result = derive(model, task["order"], compare_exact=task["check"])
    seconds = time.perf_counter() - start
    out = {"seconds": seconds, "manifold": result.manifold.dimension,
           "J01": nearest_exchange(result), "warnings": list(result.warnings)}
    if result.check is not None:
        top = result.check.max_abs_error[task["order"]]
        out["check_error"] = top
    return out


def run_exact(task: dict) -> dict:
    """Exact effective Hamiltonian block by block (dense), and J(0,1) from it."""
    from fractions import Fraction

    import numpy as np

    from lowfold import Sector, build_basis, hamiltonian_matrix
    from lowfold.build.labels import twice_sz
    from lowfold.perturbation.manifold import find_manifold, split_operators
    from lowfold.perturbation.schrieffer_wolff import exact_effective_hamiltonian

    model = hubbard(task["shape"], task["size"], task["boundary"], task["order"])
    start = time.perf_counter()
    h0, _ = split_operators(model)
    states = find_manifold(model, h0).states
    n = model.n_sites
    up = states & ((1 << n) - 1)
    z01 = np.where((up & 1) > 0, 1.0, -1.0) * np.where((up & 2) > 0, 1.0, -1.0)
    sz2 = twice_sz(model, states)
    trace, largest = 0.0, 0
    for value in np.unique(sz2):
        block = model.with_sector(Sector(model.sector.particles, Fraction(int(value), 2)))
        basis = build_basis(block)
        largest = max(largest, basis.size)
        h = hamiltonian_matrix(block, basis).toarray()
        mine = np.flatnonzero(sz2 == value)
        h_eff = exact_effective_hamiltonian(h, basis.index(states[mine]))
        trace += float(np.real(np.diagonal(h_eff)) @ z01[mine])
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "manifold": int(states.size), "largest_block": largest,
            "J01": 4 * trace / 2**n}


def child(task: dict) -> dict:
    warm_up()
    runner = run_exact if task["kind"] == "exact" else run_derive
    if task.get("profile"):
        import cProfile
        import io
        import pstats

        profiler = cProfile.Profile()
        out = profiler.runcall(runner, task)
        text = io.StringIO()
        pstats.Stats(profiler, stream=text).sort_stats("cumulative").print_stats(30)
        sys.stderr.write(text.getvalue())
        return out
    return runner(task)


# --------------------------------------------------------------------------- parent side

def physical_memory() -> int:
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def run_child(task: dict, timeout: float, *, memory: int | None = None,
              show_stderr: bool = False) -> dict:
    """Run one task in a fresh interpreter (address space capped at ``memory`` bytes); add
    its peak memory (``ru_maxrss``)."""
    import resource

    def cap():
        if memory:
            resource.setrlimit(resource.RLIMIT_AS, (memory, memory))

    load_before = os.getloadavg()[0]
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        proc = subprocess.Popen([sys.executable, __file__, "--child", json.dumps(task)],
                                stdout=out, stderr=err, preexec_fn=cap)
        deadline = time.monotonic() + timeout
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                break
            if time.monotonic() > deadline:
                proc.kill()
                os.wait4(proc.pid, 0)
                return dict(task, error=f"timed out after {timeout:.0f} s")
            time.sleep(0.05)
        code = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        errors = err.read()
        if show_stderr:
            sys.stderr.write(errors)
        lines = [line for line in out.read().splitlines() if line.startswith("{")]
        if code != 0 or not lines:
            tail = errors.strip().splitlines()[-1:]
            return dict(task, error=f"exit {code}: {' | '.join(tail)}")
    result = dict(task, **json.loads(lines[-1]))
    result["peak_mb"] = usage.ru_maxrss / 1024
    result["load_before"] = load_before
    result["load_after"] = os.getloadavg()[0]
    return result


def task(kind, shape, size, boundary, order, check=False) -> dict:
    return {"kind": kind, "shape": shape, "size": list(size), "boundary": boundary,
            "order": order, "check": check}


def label(t: dict) -> str:
    size = "x".join(str(s) for s in t["size"])
    return f"{t['shape']} {size} {t['boundary']}"


def largest_block(size) -> int:
    """States of the largest S^z block of the half-filled sector."""
    from math import comb

    n = 1
    for s in size:
        n *= s
    return comb(n, n // 2) * comb(n, n - n // 2)


def series(quick: bool, dense_limit: int) -> list[list[dict]]:
    """Lists of tasks of growing size; a list stops at its first failure."""
    chains = CHAINS[:3] if quick else CHAINS
    clusters = CLUSTERS[:2] if quick else CLUSTERS
    geometries = [("chain", [L], "open") for L in chains]
    geometries += [("square", list(c), "open") for c in clusters]
    out = []
    for kind in ("chain", "square"):
        mine = [g for g in geometries if g[0] == kind]
        for order in ORDERS:
            out.append([task("derive", *g, order) for g in mine])
        out.append([task("derive+check", *g, 4, check=True) for g in mine])
        out.append([task("exact", *g, 4) for g in mine if largest_block(g[1]) <= dense_limit])
    out.append([task("derive", "square", [4, 4], "periodic", 2)])
    out.append([task("derive+check", "square", [4, 4], "periodic", 2, check=True)])
    if quick:
        out.append([task("derive", "square", [3, 3], "open", 4)])
    return out


def print_table(results: list[dict]) -> None:
    rows = {}
    for r in results:
        rows.setdefault(label(r), {})[(r["kind"], r["order"])] = r
    head = (f"{'cluster':<22}{'P dim':>7}  {'kind':<13}{'order':>5}{'seconds':>10}{'peak MB':>9}"
            f"{'J(0,1)':>14}  note")
    print(head)
    print("-" * len(head))
    for name, entries in rows.items():
        for (kind, order), r in sorted(entries.items(), key=lambda kv: (kv[0][0] != "derive", kv[0])):
            if "error" in r:
                print(f"{name:<22}{'':>7}  {kind:<13}{order if kind != 'exact' else '-':>5}"
                      f"{'':>10}{'':>9}{'':>14}  {r['error']}")
                continue
            note = []
            if "check_error" in r:
                note.append(f"check err {r['check_error']:.1e}")
            if r.get("largest_block"):
                note.append(f"dense block {r['largest_block']}")
            if r.get("warnings"):
                note.append("; ".join(w[:60] for w in r["warnings"]))
            j = f"{r['J01']:.10f}" if r.get("J01") is not None else "-"
            print(f"{name:<22}{r['manifold']:>7}  {kind:<13}{order if kind != 'exact' else '-':>5}"
                  f"{r['seconds']:>10.2f}{r['peak_mb']:>9.0f}{j:>14}  {' '.join(note)}")


def ratios(results: list[dict]) -> list[dict]:
    """Time and memory of the exact route over derive at order 6 (and 4), same cluster."""
    out = []
    by = {(label(r), r["kind"], r["order"]): r for r in results if "error" not in r}
    for (name, kind, _), exact in by.items():
        if kind != "exact":
            continue
        for order in (4, 6):
            mine = by.get((name, "derive", order))
            if mine:
                out.append({"cluster": name, "order": order,
                            "time_ratio": exact["seconds"] / mine["seconds"],
                            "memory_ratio": exact["peak_mb"] / mine["peak_mb"],
                            "J01_exact": exact["J01"], "J01_derive": mine["J01"]})
    return out


def goals(results: list[dict]) -> list[dict]:
    out = []
    for g in GOALS:
        for kind in ("derive", "derive+check"):
            match = [r for r in results if r["kind"] == kind and r["shape"] == g["shape"]
                     and r["size"] == g["size"] and r["boundary"] == g["boundary"]
                     and r["order"] == g["order"]]
            if match:
                r = match[0]
                seconds = r.get("seconds")
                skipped = any("check skipped" in w for w in r.get("warnings", []))
                out.append({"goal": g["goal"], "kind": kind, "seconds": seconds,
                            "met": seconds is not None and seconds < g["seconds"],
                            "error": r.get("error") or ("exact check skipped (too large)"
                                                        if skipped else None)})
    return out


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small clusters and the goals")
    parser.add_argument("--limit", type=float, default=300.0, help="seconds per measurement")
    parser.add_argument("--dense-limit", type=int, default=5000,
                        help="largest S^z block diagonalised densely by the exact route")
    parser.add_argument("--memory-gb", type=float, default=None,
                        help="address-space cap of each measurement (default: 80%% of RAM)")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT)
    parser.add_argument("--profile", metavar="'SHAPE AxB BOUNDARY ORDER [check]'",
                        help="profile one measurement (cProfile, top 30 by cumulative time)")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(json.loads(args.child))))
        return
    memory = int((args.memory_gb * 2**30) if args.memory_gb else 0.8 * physical_memory())
    if args.profile:
        shape, size, boundary, order, *rest = args.profile.split()
        t = task("derive+check" if rest else "derive", shape,
                 [int(s) for s in size.split("x")], boundary, int(order), check=bool(rest))
        t["profile"] = True
        print(json.dumps(run_child(t, args.limit * 4, memory=memory, show_stderr=True)))
        return
    started = time.time()
    results = []
    for tasks in series(args.quick, args.dense_limit):
        for t in tasks:
            r = run_child(t, args.limit, memory=memory)
            results.append(r)
            status = r.get("error") or f"{r['seconds']:.2f} s, {r['peak_mb']:.0f} MB"
            print(f"  {r['kind']:<13} {label(r):<22} order {r['order']}: {status}",
                  file=sys.stderr, flush=True)
            if "error" in r:
                break
    baseline = run_child({"kind": "derive", "shape": "chain", "size": [2], "boundary": "open",
                          "order": 2, "check": False}, args.limit, memory=memory)
    print_table(results)
    print(f"\nbaseline (interpreter, imports, warm-up on the dimer): "
          f"{baseline.get('peak_mb', float('nan')):.0f} MB")
    ratio_rows = ratios(results)
    if ratio_rows:
        print("\nexact route / derive (same cluster):")
        for r in ratio_rows:
            print(f"  {r['cluster']:<22} vs order {r['order']}: time x{r['time_ratio']:.1f}, "
                  f"memory x{r['memory_ratio']:.2f}; J(0,1) exact {r['J01_exact']:.10f}, "
                  f"order {r['order']} {r['J01_derive']:.10f}")
    goal_rows = goals(results)
    print("\ngoals:")
    for g in goal_rows:
        seconds = "-" if g["seconds"] is None else f"{g['seconds']:.1f} s"
        print(f"  {g['goal']} [{g['kind']}]: {seconds} -> "
              f"{'met' if g['met'] else 'MISSED'}{' (' + g['error'] + ')' if g['error'] else ''}")
    record = {"benchmark": "bench_derive", "started": time.strftime("%Y-%m-%dT%H:%M:%S",
                                                                     time.localtime(started)),
              "wall_seconds": time.time() - started,
              "machine": {"cpus": os.cpu_count(), "platform": platform.platform(),
                          "python": platform.python_version()},
              "parameters": {"t": T, "U": U, "limit_seconds": args.limit,
                             "memory_cap_gb": memory / 2**30,
                             "dense_limit": args.dense_limit},
              "baseline_peak_mb": baseline.get("peak_mb"),
              "results": results, "ratios": ratio_rows, "goals": goal_rows}
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(record, indent=1))
    print(f"\nwritten {args.out}")


if __name__ == "__main__":
    main()
