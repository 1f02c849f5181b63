"""Scan files that would plan without end or name an impossible path: refused at once.

Found by the fuzz suite (tests/test_fuzz_scan.py): a range of 10**9 values was planned point
by point, and a NUL character in the model path raised ValueError from the file system.
"""

import time

import pytest

from lowfold.errors import ModelError
from lowfold.scans.scanfile import MAX_POINTS, parse_scan


def scan(grid, model="pair.toml"):
    return {"model": model, "task": {"name": "spectrum"}, "grid": grid}


def test_a_huge_range_is_refused_before_any_value_is_made():
    start = time.perf_counter()
    with pytest.raises(ModelError, match=r"grid\.U: num = 1,000,000,000 is more than"):
        parse_scan(scan({"U": {"start": 1, "stop": 2, "num": 10**9}}), source="s.toml")
    assert time.perf_counter() - start < 1.0


def test_a_product_grid_past_the_limit_is_refused():
    side = int(MAX_POINTS**0.5) + 1
    grid = {"U": {"start": 1, "stop": 2, "num": side}, "t": {"start": 1, "stop": 2, "num": side}}
    with pytest.raises(ModelError, match="split it into several scans"):
        parse_scan(scan(grid), source="s.toml")
    # the same axes zipped are only `side` points
    assert len(parse_scan(scan({**grid, "combine": "zip"}), source="s.toml").axes) == 2


def test_a_model_path_with_a_nul_character_is_a_model_error():
    with pytest.raises(ModelError, match="model: the path .* holds control characters"):
        parse_scan(scan({"U": [1.0]}, model="pair\x00.toml"), source="s.toml")
