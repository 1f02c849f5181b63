"""docs/model-files.md against the parser: its keys are the keys the parser accepts, its
TOML examples are valid and use documented keys only, and its first example gives the
stated superexchange.

Source of the stated value: two-site Hubbard model, ``J = (sqrt(U^2 + 16 t^2) - U)/2 =
4 t^2/U - 16 t^4/U^3 + O(t^6/U^5)`` (closed form of the 2x2 singlet block, common practice;
the fourth-order term as in M. Takahashi, J. Phys. C 10, 1289 (1977)).
"""

from __future__ import annotations

import re
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:          # Python 3.10
    import tomli as tomllib

import pytest

from lowfold import ModelError, derive, parse_model

DOC = Path(__file__).resolve().parents[1] / "docs" / "model-files.md"
TEXT = DOC.read_text()
BLOCKS = re.findall(r"```toml\n(.*?)```", TEXT, flags=re.DOTALL)
TABLES = ("lattice", "site", "sector", "term", "perturbation")


def section(heading: str) -> str:
    start = TEXT.index(f"\n## {heading}\n")
    end = TEXT.find("\n## ", start + 1)
    return TEXT[start:end if end > 0 else None]


def documented_keys(table: str) -> set[str]:
    """First-column names of the ``| key | value | default |`` table of a section."""
    heading = "`[[term]]`" if table == "term" else f"`[{table}]`"
    lines = section(heading).splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("| key |"))
    keys = set()
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        keys.add(re.match(r"\| `([a-z_]+)`", line).group(1))
    return keys


def example() -> dict:
    return tomllib.loads(BLOCKS[0])


def allowed_keys(table: str) -> set[str]:
    """The keys the parser lists when it meets an unknown one in ``table``."""
    data = example()
    target = data["term"][0] if table == "term" else data.setdefault(table, {})
    target["no_such_key"] = 1
    with pytest.raises(ModelError, match="unknown key") as info:
        parse_model(data)
    return set(re.search(r"\(allowed: ([^)]*)\)", str(info.value)).group(1).split(", "))


@pytest.mark.parametrize("table", TABLES)
def test_documented_keys_are_the_parsers(table):
    assert documented_keys(table) == allowed_keys(table)


def test_top_level_tables_are_the_parsers():
    data = example()
    data["no_such_key"] = 1
    with pytest.raises(ModelError, match="unknown key") as info:
        parse_model(data)
    allowed = set(re.search(r"\(allowed: ([^)]*)\)", str(info.value)).group(1).split(", "))
    glance = re.findall(r"^\| `\[{1,2}([a-z]+)\]{1,2}` \|", section("Tables at a glance"),
                        flags=re.MULTILINE)
    assert set(glance) | {"title"} == allowed


@pytest.mark.parametrize("block", BLOCKS, ids=[f"block{k}" for k in range(len(BLOCKS))])
def test_examples_use_documented_keys(block):
    data = tomllib.loads(block)
    for key, value in data.items():
        if key == "title":
            continue
        if key == "parameters":
            assert all(isinstance(v, (int, float)) or set(v) in ({"re", "im"}, {"abs", "phase"})
                       for v in value.values())      # real, or a documented complex form
            continue
        assert key in TABLES
        for entry in value if isinstance(value, list) else [value]:
            assert set(entry) <= documented_keys(key)


def test_first_example_gives_the_stated_superexchange():
    model = parse_model(example())
    t, u = model.parameters["t"], model.parameters["U"]
    result = derive(model, compare_exact=False)
    exchange = [c for c in result.couplings if c.kind == "exchange"]
    assert len(exchange) == 1 and exchange[0].sites == (0, 1)
    assert exchange[0].value == pytest.approx(4 * t**2 / u - 16 * t**4 / u**3, rel=1e-9)
