"""Memory and time of each Schrieffer-Wolff order, sparse against the dense twin, and the
exact check of the 12-site chain with and without the spin-reversal shortcut.

Models: half-filled Hubbard clusters, t = 0.1, U = 1, H0 = U (as ``bench_derive.py``).
Kinds of measurement, each in its own subprocess (peak memory = ``ru_maxrss`` of that child,
read with ``os.wait4``; address space capped by ``--memory-gb``; numba kernels warmed up on
the dimer first):

* ``orders``: per S^z block the working space, V on it and
  ``effective_orders(..., dense=False)``; per order the seconds (summed over blocks) and the
  bytes kept (``H_eff,m`` summed over blocks, generator and nested commutators of the
  largest block);
* ``orders-dense``: the same with ``dense=True``, the code as it was before the orders became
  sparse (no round-off dropped, each order's P-P block a dense array).  Run only where its
  estimate (``5 * (order + 1) * 8 * dimP_block^2`` bytes: the dense block of every order and
  the temporaries of symmetrising it and of converting it to coordinates) fits the cap;
  otherwise the estimate is reported;
* ``derive``: the whole ``derive(model, n, compare_exact=False)`` (the ``--no-check`` path);
* ``check``: ``derive(model, 4)`` with its exact check (default levels), and ``check-before``
  the same with the spin-reversal shortcut switched off (every S^z block's levels computed);
* ``check-product`` and ``check-csr`` (``--product``): ``derive(model, 2)`` of half-filled
  Hubbard rings with the check's blocks solved in the product basis (``--sixteen``: also the
  16-site ring, 165,636,900 states at S^z = 0, with one level per block) or as sparse
  matrices; the routes of the blocks are printed beside;
* with ``--before-src DIR`` (the ``src`` folder of an earlier lowfold, e.g. from ``git archive
  ce59d25 src | tar -x -C /tmp/before``): ``derive-old`` and ``check-old``, the same derive
  and check run by that code (skipped for the 4x4 clusters, whose dense orders the issue
  measured at 14.6-15.2 GB).

The machine is shared: compare ratios of one run, and note the load average printed beside
each point.  Results go to ``benchmarks/results/bench_orders.json``.

Usage::

    python benchmarks/bench_orders.py              # everything (about 15 minutes when quiet)
    python benchmarks/bench_orders.py --quick      # small clusters only
    python benchmarks/bench_orders.py --product --sixteen --memory-gb 12
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
sys.path.insert(0, str(HERE))
from bench_derive import hubbard, physical_memory, warm_up  # noqa: E402

DEFAULT_OUT = HERE / "results" / "bench_orders.json"
GOALS = [
    ("order 4, 4x4 periodic, under 2 GB and 2 minutes", ("square", [4, 4], "periodic", 4),
     2048, 120),
    ("order 4, 4x4 open, under 2 GB and 2 minutes", ("square", [4, 4], "open", 4), 2048, 120),
    ("order 6, 12-site chain", ("chain", [12], "open", 6), None, None),
    ("12-site chain, order 4 with its check, under 60 s", ("chain", [12], "open", 4), None, 60),
]


# --------------------------------------------------------------------------- child side

def run_orders(task: dict, dense: bool) -> dict:
    import numpy as np

    from lowfold.jobs.derive import _blocks, _whole_manifold
    from lowfold.perturbation.manifold import (diagonal_energies, find_manifold,
                                               split_operators, working_operator)
    from lowfold.perturbation.schrieffer_wolff import effective_orders

    order = task["order"]
    model, _ = _whole_manifold(hubbard(task["shape"], task["size"], task["boundary"], order))
    start = time.perf_counter()
    h0, v = split_operators(model)
    manifold = find_manifold(model, h0)
    per_order = [{"seconds": 0.0, "effective_bytes": 0, "generator_bytes": 0,
                  "commutator_bytes": 0} for _ in range(order + 1)]
    largest, working_states, space_seconds = 0, 0, 0.0
    for block in _blocks(model, manifold, True):
        p_states = manifold.states[block.p_positions]
        largest = max(largest, p_states.size)
        tick = time.perf_counter()
        working, v_work, distance = working_operator(v, p_states, max(1, order // 2),
                                                     outer=order > 1 and order % 2 == 1,
                                                     by_shell=True)
        space_seconds += time.perf_counter() - tick
        working_states = max(working_states, working.size)
        energies = diagonal_energies(h0, working)
        _, costs = effective_orders(energies, v_work, np.arange(p_states.size), order,
                                    dense=dense, check_v=False, distance=distance)
        for row, cost in zip(per_order, costs):
            row["seconds"] += cost.seconds
            row["effective_bytes"] += cost.effective_bytes
            row["generator_bytes"] = max(row["generator_bytes"], cost.generator_bytes)
            row["commutator_bytes"] = max(row["commutator_bytes"], cost.commutator_bytes)
    return {"seconds": time.perf_counter() - start, "manifold": int(manifold.dimension),
            "largest_block": int(largest), "working_states": int(working_states),
            "space_seconds": space_seconds, "per_order": per_order}


def run_derive(task: dict, check: bool, mirror: bool = True) -> dict:
    from lowfold.jobs.derive import derive

    if not mirror:
        import lowfold.jobs.check as check_module
        check_module.mirror_images = lambda *args: False
    if "product_min" in task:
        import lowfold.jobs.check_product as product_module
        product_module.PRODUCT_CHECK_MIN_STATES = task["product_min"]
    model = hubbard(task["shape"], task["size"], task["boundary"], task["order"])
    start = time.perf_counter()
    say = None
    if task.get("log"):                  # progress lines with their time, for long runs
        def say(message, path=task["log"]):
            with open(path, "a") as log:
                log.write(f"{time.perf_counter() - start:8.1f} s  {message}\n")
    result = derive(model, task["order"], compare_exact=check,
                    check_levels=task.get("levels", 8), progress=say)
    out = {"seconds": time.perf_counter() - start, "manifold": result.manifold.dimension,
           "memory": getattr(result.diagnostics, "memory", None),
           "warnings": list(result.warnings)}
    if result.check is not None:
        out["check_error"] = result.check.max_abs_error[task["order"]]
        out["levels_compared"] = len(result.check.exact)
        out["routes"] = {b.sz: b.method for b in result.check.blocks}
    return out


def child(task: dict) -> dict:
    warm_up()
    kind = task["kind"]
    if kind in ("orders", "orders-dense"):
        return run_orders(task, dense=kind == "orders-dense")
    if kind in ("derive", "derive-old"):
        return run_derive(task, check=False)
    if kind in ("check-csr", "check-product"):
        return run_derive(task, check=True)
    if kind == "check-old":
        return run_derive(task, check=True)
    return run_derive(task, check=True, mirror=kind == "check")


# --------------------------------------------------------------------------- parent side

def run_child(task: dict, timeout: float, memory: int, source: str | None = None) -> dict:
    import resource

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (memory, memory))

    env = dict(os.environ)
    if task["kind"].endswith("-old"):
        env["PYTHONPATH"] = source

    load_before = os.getloadavg()[0]
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        proc = subprocess.Popen([sys.executable, __file__, "--child", json.dumps(task)],
                                stdout=out, stderr=err, preexec_fn=cap, env=env)
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
        out.seek(0)
        err.seek(0)
        lines = [line for line in out.read().splitlines() if line.startswith("{")]
        code = os.waitstatus_to_exitcode(status)
        if code != 0 or not lines:
            tail = err.read().strip().splitlines()[-1:]
            return dict(task, error=f"exit {code}: {' | '.join(tail)}")
    return dict(task, **json.loads(lines[-1]), peak_mb=usage.ru_maxrss / 1024,
                load=(load_before + os.getloadavg()[0]) / 2)


def dense_estimate(size, order) -> int:
    """Bytes of the dense twin at its peak: see the module docstring."""
    from math import comb

    n = 1
    for s in size:
        n *= s
    block = comb(n, n // 2)          # the S^z = 0 block of the half-filled Mott manifold
    return 5 * (order + 1) * 8 * block**2


def product_plan(sixteen: bool) -> list[dict]:
    """The check in the product basis (``lowfold.jobs.check_product``): the 12-site ring by
    both routes (the product route forced on every block above 1200 states, and the sparse
    route alone), the 14-site ring at order 2 with the lowest 8 levels of each S^z block and,
    with ``--sixteen``, the 16-site ring and the periodic 4x4 cluster at order 2 with the
    lowest level of each block."""
    ring = {"shape": "chain", "boundary": "periodic", "order": 2}
    tasks = [dict(ring, size=[12], kind="check-product", product_min=1200),
             dict(ring, size=[12], kind="check-csr", product_min=10**12),
             dict(ring, size=[14], kind="check-product")]
    if sixteen:
        tasks.append(dict(ring, size=[16], kind="check-product", levels=1,
                          log=str(DEFAULT_OUT.with_name("ring16_check.log"))))
        tasks.append(dict(ring, shape="square", size=[4, 4], kind="check-product", levels=1,
                          log=str(DEFAULT_OUT.with_name("square4x4_check.log"))))
    return tasks


def plan(quick: bool, before: bool) -> list[dict]:
    geometries = [("chain", [8], "open", 6), ("square", [2, 3], "open", 6),
                  ("square", [3, 3], "open", 4)]
    if not quick:
        geometries += [("chain", [12], "open", 6), ("square", [3, 4], "open", 4),
                       ("square", [4, 4], "open", 4), ("square", [4, 4], "periodic", 4)]
    tasks = []
    for shape, size, boundary, order in geometries:
        base = {"shape": shape, "size": size, "boundary": boundary, "order": order}
        tasks += [dict(base, kind="orders"), dict(base, kind="orders-dense"),
                  dict(base, kind="derive")]
        if before:
            tasks.append(dict(base, kind="derive-old"))
    chain = {"shape": "chain", "size": [10 if quick else 12], "boundary": "open", "order": 4}
    tasks += [dict(chain, kind="check"), dict(chain, kind="check-before")]
    if before:
        tasks.append(dict(chain, kind="check-old"))
    return tasks


def label(t: dict) -> str:
    return f"{t['shape']} {'x'.join(map(str, t['size']))} {t['boundary']}"


def print_tables(results: list[dict]) -> None:
    head = (f"{'cluster':<22}{'kind':<14}{'order':>5}{'P dim':>7}{'seconds':>9}{'peak MB':>9}"
            f"{'load':>6}  note")
    print(head)
    print("-" * len(head))
    for r in results:
        if "error" in r or "skipped" in r:
            print(f"{label(r):<22}{r['kind']:<14}{r['order']:>5}{'':>7}{'':>9}{'':>9}{'':>6}  "
                  f"{r.get('error') or r['skipped']}")
            continue
        note = []
        if "check_error" in r:
            note.append(f"check err {r['check_error']:.1e}, {r['levels_compared']} levels")
        if "routes" in r:
            note.append("routes " + ", ".join(f"{sz}: {m}" for sz, m in r["routes"].items()
                                              if m and m != "dense"))
        if "working_states" in r:
            note.append(f"largest block {r['largest_block']}, {r['working_states']:,} "
                        f"working states ({r['space_seconds']:.1f} s to build)")
        print(f"{label(r):<22}{r['kind']:<14}{r['order']:>5}{r['manifold']:>7}"
              f"{r['seconds']:>9.2f}{r['peak_mb']:>9.0f}{r['load']:>6.1f}  {'; '.join(note)}")
    print("\nper order (orders / orders-dense): seconds summed over S^z blocks; MB kept "
          "(H_eff,m over all blocks; S_m and nested commutators of the largest block)")
    head = (f"{'cluster':<22}{'kind':<14}{'m':>3}{'seconds':>9}{'H_eff MB':>10}{'S_m MB':>9}"
            f"{'comm MB':>9}")
    print(head)
    print("-" * len(head))
    for r in results:
        for m, row in enumerate(r.get("per_order", [])):
            print(f"{label(r):<22}{r['kind']:<14}{m:>3}{row['seconds']:>9.2f}"
                  f"{row['effective_bytes'] / 2**20:>10.2f}{row['generator_bytes'] / 2**20:>9.2f}"
                  f"{row['commutator_bytes'] / 2**20:>9.2f}")


def goals(results: list[dict]) -> list[dict]:
    out = []
    for text, (shape, size, boundary, order), mb, seconds in GOALS:
        kind = "check" if "check" in text else "derive"
        match = [r for r in results if r["kind"] == kind and r["shape"] == shape
                 and r["size"] == size and r["boundary"] == boundary and r["order"] == order
                 and "error" not in r]
        if not match:
            out.append({"goal": text, "met": False, "error": "not measured"})
            continue
        r = match[0]
        met = (seconds is None or r["seconds"] < seconds) and (mb is None or r["peak_mb"] < mb)
        out.append({"goal": text, "seconds": r["seconds"], "peak_mb": r["peak_mb"],
                    "load": r["load"], "met": met})
    return out


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small clusters only")
    parser.add_argument("--limit", type=float, default=900.0, help="seconds per measurement")
    parser.add_argument("--memory-gb", type=float, default=None,
                        help="address-space cap of each measurement (default: 60%% of RAM)")
    parser.add_argument("--only", help="run only the tasks whose 'cluster kind' contains this")
    parser.add_argument("--product", action="store_true",
                        help="only the check in the product basis (12- and 14-site rings)")
    parser.add_argument("--sixteen", action="store_true",
                        help="with --product: also the 16-site ring (several minutes, ~7 GB)")
    parser.add_argument("--before-src", help="src folder of an earlier lowfold to run as 'old'")
    parser.add_argument("--out", type=Path, default=None,
                        help="JSON written (default results/bench_orders.json, with --product "
                             "results/bench_orders_product.json)")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(json.loads(args.child))))
        return
    memory = int(args.memory_gb * 2**30 if args.memory_gb else 0.6 * physical_memory())
    started = time.time()
    results = []
    tasks = product_plan(args.sixteen) if args.product else plan(args.quick, bool(args.before_src))
    for t in tasks:
        if args.only and args.only not in f"{label(t)} {t['kind']}":
            continue
        if (t["kind"] in ("orders-dense", "derive-old")
                and dense_estimate(t["size"], t["order"]) > memory):
            need = dense_estimate(t["size"], t["order"]) / 2**30
            r = dict(t, skipped=f"not run: estimated {need:.1f} GiB (cap {memory / 2**30:.1f} "
                                f"GiB); the issue measured 14.6-15.2 GB for 4x4 order 4",
                     estimate_gib=need)
        else:
            r = run_child(t, args.limit, memory, args.before_src)
        results.append(r)
        status = r.get("error") or r.get("skipped") or f"{r['seconds']:.2f} s, {r['peak_mb']:.0f} MB"
        print(f"  {t['kind']:<13} {label(t):<22} order {t['order']}: {status}", file=sys.stderr,
              flush=True)
    print_tables(results)
    goal_rows = goals(results)
    print("\ngoals:")
    for g in goal_rows:
        if "seconds" in g:
            print(f"  {g['goal']}: {g['seconds']:.1f} s, {g['peak_mb']:.0f} MB (load "
                  f"{g['load']:.1f}) -> {'met' if g['met'] else 'MISSED'}")
        else:
            print(f"  {g['goal']}: {g['error']}")
    record = {"benchmark": "bench_orders",
              "started": time.strftime("%Y-%m-%dT%H:%M:%S", time.localtime(started)),
              "wall_seconds": time.time() - started,
              "machine": {"cpus": os.cpu_count(), "platform": platform.platform(),
                          "python": platform.python_version()},
              "parameters": {"t": 0.1, "U": 1.0, "memory_cap_gb": memory / 2**30,
                             "limit_seconds": args.limit},
              "results": results, "goals": goal_rows}
    if args.out is None:
        args.out = DEFAULT_OUT.with_name("bench_orders_product.json") if args.product else DEFAULT_OUT
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(record, indent=1, allow_nan=False))
    print(f"\nwritten {args.out}")


if __name__ == "__main__":
    main()
