"""Faults of the scan store: unwritable and full directories, edited and stray files, the
umask, a second scan on the same store, Ctrl-C and SIGKILL of a running scan.

The scans compute the spectrum of the half-filled Hubbard dimer, whose ground level is
``(U - sqrt(U^2 + 16 t^2)) / 2`` (exact diagonalisation of the 4x4 S^z = 0 block; common
practice), so every stored result is also checked against something outside the project.
The tests run as root in CI, where ``chmod`` does not stop a write: a read-only store is
tested by checking that a finished scan writes nothing at all (and, for a non-root user,
by ``chmod`` for real), an unwritable ``--out`` by a path below a regular file, and a full
disk by a file system call made to fail with ENOSPC in-process.
"""

import errno
import json
import os
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from helpers.cli import LOWFOLD, one_line_error, run, succeeded
from helpers.modelfiles import hubbard_text
from helpers.scan_records import dimer_levels
from lowfold.errors import StoreError
from lowfold.scans.store import ResultStore, load_results, open_results, write_json_atomic

U_VALUES = [4.0, 8.0, 12.0]


def write_scan(directory, u_values=U_VALUES, size=2):
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "dimer.toml").write_text(hubbard_text("chain", (size,), t=1.0, U=8.0, sz=0))
    values = ", ".join(repr(u) for u in u_values)
    (directory / "scan.toml").write_text(
        f'model = "dimer.toml"\n[task]\nname = "spectrum"\nlevels = 2\n[grid]\nU = [{values}]\n')
    return directory / "scan.toml"


def _snapshot(directory):
    """(name, inode, mtime) of every file under ``directory``: any write changes it."""
    return sorted((str(p.relative_to(directory)), p.stat().st_ino, p.stat().st_mtime_ns)
                  for p in Path(directory).rglob("*"))


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    """A finished scan of three points, run once through the command line."""
    directory = tmp_path_factory.mktemp("finished")
    scan = write_scan(directory)
    succeeded(run("scan", scan, "--out", directory / "out", "--workers", "1"))
    return scan, directory / "out"


def test_finished_scan_is_right_and_files_honour_the_umask(finished):
    scan, out = finished
    for record in load_results(out):
        U = record["parameters"]["U"]
        assert record["result"]["energies"][0] == pytest.approx(dimer_levels(1.0, U)[0], abs=1e-10)
    umask = os.umask(0)
    os.umask(umask)                                  # read back the umask the script ran with
    for path in [*(out / "points").iterdir(), out / "scan.json", out / "results.csv"]:
        assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask, path


def test_umask_of_a_shared_group_is_honoured(tmp_path):
    # a group-shared umask (0o007 leaves rw for the group): mkstemp would give 0o600
    code = textwrap.dedent(f"""
        import os
        os.umask(0o007)
        from lowfold.scans.store import ResultStore
        ResultStore({str(tmp_path)!r}).put({{"key": "a" * 20, "status": "error"}})
    """)
    subprocess.run([sys.executable, "-c", code], check=True)
    assert stat.S_IMODE((tmp_path / "points" / ("a" * 20 + ".json")).stat().st_mode) == 0o660


def test_rerun_of_a_finished_scan_writes_nothing(finished):
    scan, out = finished
    before = _snapshot(out)
    data = json.loads(succeeded(run("scan", scan, "--out", out, "--json")))
    assert data["skipped"] == len(U_VALUES) and data["computed"] == 0 and data["warnings"] == []
    assert _snapshot(out) == before                  # not even scan.json or results.csv
    if os.geteuid() != 0:                            # root writes through any mode bits
        modes = {p: p.stat().st_mode for p in [out, *out.rglob("*")]}
        try:
            for p in modes:
                p.chmod(modes[p] & ~0o222)
            succeeded(run("scan", scan, "--out", out))
        finally:
            for p, mode in modes.items():
                p.chmod(mode)


def test_unwritable_out_is_one_line(tmp_path):
    scan = write_scan(tmp_path)
    (tmp_path / "file").write_text("a regular file")
    message = one_line_error(run("scan", scan, "--out", tmp_path / "file" / "out"))
    assert "file/out/points: cannot create the results directory (Not a directory)" in message


def test_full_disk_is_one_error_and_leaves_the_old_record(tmp_path, monkeypatch):
    store = ResultStore(tmp_path)
    old = {"key": "b" * 20, "status": "error", "error": {"type": "ModelError", "message": "old"}}
    store.put(old)

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(StoreError, match=r"b{20}\.json: cannot write \(No space left on device\)"):
        store.put({**old, "error": {"type": "ModelError", "message": "new"}})
    with pytest.raises(StoreError, match="scan.json: cannot write"):
        write_json_atomic(tmp_path / "scan.json", {"a": 1})
    monkeypatch.undo()
    assert store.get("b" * 20) == old
    assert sorted(p.name for p in tmp_path.rglob("*")) == ["b" * 20 + ".json", "points"]   # no temporary file


def test_edited_and_stray_files_are_skipped_with_a_warning(tmp_path):
    scan = write_scan(tmp_path)
    out = tmp_path / "out"
    succeeded(run("scan", scan, "--out", out, "--workers", "1"))
    edited = sorted((out / "points").iterdir())[0]
    record = json.loads(edited.read_text())
    edited.write_text(json.dumps({**record, "result": None}))          # "ok" without a result
    (out / "points" / "notes.txt").write_text("a stray file")
    (out / "points" / "copy.json").write_text("{}")
    reader = open_results(out)
    assert len(reader.records()) == len(U_VALUES) - 1
    assert len(reader.warnings) == 3 and any("notes.txt" in w for w in reader.warnings)
    # the plot draws the other points and says what it skipped
    proc = run("plot", out, "--kind", "levels", "--x", "U", "-o", tmp_path / "levels.png")
    succeeded(proc)
    assert proc.stderr.count("lowfold: warning:") == 3 and "notes.txt" in proc.stderr
    # the resume recomputes the edited point only, and says what it skipped
    data = json.loads(succeeded(run("scan", scan, "--out", out, "--json", "--workers", "1")))
    assert (data["computed"], data["skipped"], data["ok"]) == (1, len(U_VALUES) - 1, True)
    assert len(data["warnings"]) == 3
    fixed = json.loads(edited.read_text())
    U = fixed["parameters"]["U"]
    assert fixed["result"]["energies"][0] == pytest.approx(dimer_levels(1.0, U)[0], abs=1e-10)


def test_a_second_scan_on_a_locked_store_refuses(finished, tmp_path):
    scan, out = finished
    other = write_scan(tmp_path, u_values=[16.0])
    with ResultStore(out).lock():                    # a scan is writing here
        message = one_line_error(run("scan", other, "--out", out))
        assert "another scan is writing to this results directory" in message
        before = _snapshot(out)
        succeeded(run("scan", scan, "--out", out))   # nothing to compute: no lock needed
        assert _snapshot(out) == before
    assert len(load_results(out)) == len(U_VALUES)


def _slow_scan(tmp_path):
    """A scan of twelve 10-site Hubbard chains (a second or so each on one worker)."""
    scan = write_scan(tmp_path, u_values=[float(u) for u in range(4, 16)], size=10)
    text = (tmp_path / "dimer.toml").read_text().replace("particles = 2", "particles = 10")
    (tmp_path / "dimer.toml").write_text(text)
    return scan


def _start(scan, out):
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    # SIGINT restored: a shell without job control starts background jobs with it ignored
    return subprocess.Popen([LOWFOLD, "scan", str(scan), "--out", str(out), "--workers", "1"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                            stdin=subprocess.DEVNULL,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def _wait_for_points(proc, out, count):
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and len(list((out / "points").glob("*.json"))) < count:
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.05)


def test_ctrl_c_says_what_is_stored_and_sigkill_leaves_no_warning(tmp_path):
    scan = _slow_scan(tmp_path)
    out = tmp_path / "out"
    proc = _start(scan, out)
    _wait_for_points(proc, out, 2)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    stored = len(load_results(out))
    assert proc.returncode == 130 and stdout == ""
    assert stderr == (f"lowfold: interrupted: {stored} of 12 points are stored in {out}; run "
                      "the same command again to resume\n")
    # killed outright: the next points are lost, nothing else is said
    proc = _start(scan, out)
    _wait_for_points(proc, out, stored + 1)
    proc.kill()
    stdout, stderr = proc.communicate(timeout=120)    # waits for the helpers holding stderr
    assert proc.returncode == -signal.SIGKILL
    assert "leaked semaphore" not in stderr and "Traceback" not in stderr, stderr
    records = load_results(out)
    assert len(records) > stored
    for record in records:
        U = record["parameters"]["U"]
        assert record["status"] == "ok" and record["result"]["energies"][0] < 0.0, U


def test_grid_values_the_model_refuses_name_their_grid_key(tmp_path):
    from lowfold.errors import ModelError
    from lowfold.scans.plan import plan_scan
    from lowfold.scans.scanfile import load_scan

    scan = write_scan(tmp_path, u_values=[4.0, 1e300])          # past the strength limit
    with pytest.raises(ModelError, match=r"scan.toml: grid\.U: 1e\+300 is outside the strengths"):
        plan_scan(load_scan(scan))
    grid = scan.read_text().split("[grid]")[0] + "[grid]\n"
    scan.write_text(grid + "size = [2, 64]\n")
    with pytest.raises(ModelError, match=r"scan.toml: grid\.size: \(64,\): 64 electron sites do not fit"):
        plan_scan(load_scan(scan))
    # a filling that gives a fractional particle number is an impossible point, not an error
    scan.write_text(grid + "filling = [1, 0.75]\n")
    points = plan_scan(load_scan(scan))
    assert [p.error is None for p in points] == [True, False]
    assert "gives 1.5 particles" in points[1].error["message"]
