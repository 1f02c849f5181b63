"""derive on a model whose sector fixes the total S^z: the effective model is read out on
every S^z block of the manifold, and the user is told that the sector's sz was set aside.

Reference: the half-filled Hubbard chain at large U has, to fourth order, the nearest-
neighbour exchange J1 = 4t^2/U - 16t^4/U^3 and the next-nearest J2 = 4t^4/U^3 (Takahashi,
J. Phys. C 10, 1289 (1977)); on a ring of six sites no fourth-order path winds around the
ring, so these are the couplings of every bond.  On an open chain the bonds away from the
ends ((1,2), (2,3), (3,4) of six sites) see the same paths as in the bulk.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from lowfold import derive, load_model

EXAMPLE = Path(__file__).resolve().parent.parent / "examples" / "hubbard_chain.toml"


def exchange(couplings, i, j):
    found = [c for c in couplings if c["kind"] == "exchange" and c["sites"] == [i, j]]
    return found[0] if found else None


def test_shipped_example_gives_its_exchange_couplings_on_the_command_line():
    lowfold = shutil.which("lowfold") or str(Path(sys.executable).with_name("lowfold"))
    run = subprocess.run([lowfold, "derive", str(EXAMPLE), "--json"], capture_output=True,
                         text=True, timeout=600, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    assert run.returncode == 0, run.stderr
    data = json.loads(run.stdout)
    model = load_model(EXAMPLE)
    t, U = model.parameters["t"], model.parameters["U"]
    assert data["manifold"]["readout"] == "spin-1/2"
    assert data["manifold"]["dimension"] == 2**6           # all S^z blocks, not the 20 at S^z = 0
    for i in range(6):
        j = (i + 1) % 6
        near = exchange(data["couplings"], min(i, j), max(i, j))
        assert near["orders"]["2"] == pytest.approx(4 * t**2 / U, rel=1e-9)
        assert near["orders"]["4"] == pytest.approx(-16 * t**4 / U**3, rel=1e-7)
        assert near["value"] == pytest.approx(4 * t**2 / U - 16 * t**4 / U**3, rel=1e-8)
        far = exchange(data["couplings"], min(i, (i + 2) % 6), max(i, (i + 2) % 6))
        assert far["value"] == pytest.approx(4 * t**4 / U**3, rel=1e-7)
    assert any("sz" in w and "set aside" in w for w in data["warnings"])


def test_open_chain_interior_bonds_and_the_screen_warning(tmp_path):
    text = EXAMPLE.read_text().replace('boundary = "periodic"', 'boundary = "open"')
    path = tmp_path / "open_chain.toml"
    path.write_text(text)
    model = load_model(path)
    t, U = model.parameters["t"], model.parameters["U"]
    result = derive(model, compare_exact=False)
    assert result.spin_form and result.model.sector.sz is None
    assert result.model.sector.particles == 6
    data = result.to_dict()
    for i in (1, 2, 3):
        near = exchange(data["couplings"], i, i + 1)
        assert near["value"] == pytest.approx(4 * t**2 / U - 16 * t**4 / U**3, rel=1e-8)
    assert any("sz = 0 was set aside" in w for w in result.warnings)
    lowfold = shutil.which("lowfold") or str(Path(sys.executable).with_name("lowfold"))
    screen = subprocess.run([lowfold, "derive", str(path), "--no-check"], capture_output=True,
                            text=True, timeout=600, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    assert screen.returncode == 0, screen.stderr
    assert "set aside" in " ".join(screen.stderr.split())
