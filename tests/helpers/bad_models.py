"""Broken model files: each breaks a valid file in one place, and names the strings the error
message must contain (the key and the bad value).

Shared by ``test_modelfile.py`` (the API raises ModelError) and ``test_cli.py`` (the
``lowfold`` command prints one line and exits 2).
"""

from __future__ import annotations

from dataclasses import dataclass

# A valid model that the bad cases below each break in one place.
SPIN_CHAIN = """\
title = "four spins in a row"

[lattice]
shape = "chain"
size = [4]

[site]
type = "spin"
spin = 0.5

[sector]
sz = 0

[parameters]
J = 1.0

[[term]]
type = "exchange"
strength = "J"
label = "legs"
"""

ELECTRON_PAIR = """\
[lattice]
shape = "chain"
size = [2]

[site]
type = "electron"

[sector]
particles = 2

[parameters]
t = 1.0
U = 8.0

[[term]]
type = "hopping"
strength = "t"

[[term]]
type = "hubbard"
strength = "U"
"""

# The smallest spin model file (no title, sector or parameters), which the input-guard tests
# of test_model_input*.py break in one place.
PLAIN_SPIN_CHAIN = """\
[lattice]
shape = "chain"
size = [4]
[site]
type = "spin"
[[term]]
type = "exchange"
strength = 1.0
"""


def edit(text: str, old: str, new: str) -> str:
    """``text`` with the single occurrence of ``old`` replaced by ``new``."""
    if text.count(old) != 1:
        raise ValueError(f"{old!r} must occur exactly once")
    return text.replace(old, new)


def spins(**replacements) -> str:
    text = SPIN_CHAIN
    for old, new in replacements.items():
        text = edit(text, old, new)
    return text


@dataclass(frozen=True)
class BadCase:
    """A broken model file.

    ``keys``: strings that must all appear in the message (the key and the bad value).
    """

    name: str
    text: str | None                      # None: the file does not exist
    keys: tuple = ()


BAD_CASES = [
    BadCase("unknown-top-level-key", 'colour = "red"\n' + SPIN_CHAIN, ("colour",)),
    BadCase("unknown-lattice-key", spins(**{"size = [4]": "size = [4]\nspacing = 1.0"}),
            ("lattice", "spacing")),
    BadCase("unknown-site-key", spins(**{"spin = 0.5": "spin = 0.5\ng_factor = 2.0"}),
            ("site", "g_factor")),
    BadCase("unknown-sector-key", spins(**{"sz = 0": "sz = 0\ncharge = 0"}),
            ("sector", "charge")),
    BadCase("unknown-term-key", SPIN_CHAIN + "range = 2\n", ("term[0]", "range")),
    BadCase("unknown-perturbation-key",
            SPIN_CHAIN + '\n[perturbation]\nunperturbed = ["legs"]\nmethod = "fast"\n',
            ("perturbation", "method")),
    BadCase("unknown-term-type", spins(**{'type = "exchange"': 'type = "warp"'}),
            ("term[0].type", "warp")),
    BadCase("unknown-operator",
            spins(**{'type = "exchange"': 'type = "product"\noperators = ["Sz", "Q"]'}),
            ("term[0]", "'Q'")),
    BadCase("undefined-parameter", spins(**{'strength = "J"': 'strength = "K"'}),
            ("term[0].strength", "'K'")),
    BadCase("more-electrons-than-modes", edit(ELECTRON_PAIR, "particles = 2", "particles = 5"),
            ("sector", "particles")),
    BadCase("more-bosons-than-cutoff",
            edit(edit(ELECTRON_PAIR, 'type = "electron"', 'type = "boson"\nmax_occupation = 2'),
                 "particles = 2", "particles = 5"),
            ("sector", "particles")),
    BadCase("sz-out-of-range", spins(**{"sz = 0": "sz = 3"}), ("sector", "sz")),
    BadCase("half-integer-sz-integer-spins", spins(**{"spin = 0.5": "spin = 1",
                                                      "sz = 0": "sz = 0.5"}),
            ("sector", "sz")),
    BadCase("integer-sz-odd-number-of-half-spins", spins(**{"size = [4]": "size = [3]"}),
            ("sector", "sz")),
    BadCase("sz-for-spinless-fermions",
            edit(edit(edit(ELECTRON_PAIR, 'type = "electron"', 'type = "fermion"'),
                      "particles = 2", "particles = 1\nsz = 0"),
                 '[[term]]\ntype = "hubbard"\nstrength = "U"\n', ""),
            ("sector", "sz")),
    BadCase("bond-outside-lattice", spins(**{'label = "legs"': 'label = "legs"\nbonds = [[0, 7]]'}),
            ("term[0]", "[0, 7]")),
    BadCase("unknown-bond-class", spins(**{'label = "legs"': 'label = "legs"\nbonds = "fourth"'}),
            ("term[0]", "fourth")),
    BadCase("site-outside-lattice",
            spins(**{'type = "exchange"': 'type = "field"\naxis = "z"\nsites = [9]'}),
            ("term[0]", "9")),
    BadCase("label-used-twice",
            SPIN_CHAIN + '\n[[term]]\ntype = "exchange"\nstrength = 0.5\nlabel = "legs"\n'
                         'bonds = "next-nearest"\n',
            ("term[1].label", "'legs'")),
    BadCase("field-along-x-with-sz-fixed",
            SPIN_CHAIN + '\n[[term]]\ntype = "field"\naxis = "x"\nstrength = 0.1\nlabel = "tilt"\n',
            ("term[1]", "tilt", "S^z")),
    BadCase("pumping-with-particles-fixed",
            edit(ELECTRON_PAIR, '[[term]]\ntype = "hubbard"\nstrength = "U"\n',
                 '[[term]]\ntype = "product"\noperators = ["c+_up"]\nconjugate = true\n'
                 'strength = 0.1\nlabel = "pump"\n'),
            ("term[1]", "pump", "particle")),
    BadCase("non-hermitian-product",
            spins(**{'type = "exchange"': 'type = "product"\noperators = ["S+", "S-"]',
                     'label = "legs"': 'label = "flip"'}),
            ("term[0]", "flip", "Hermitian")),
    BadCase("invalid-toml", spins(**{"[lattice]": "[lattice"}), ("TOML",)),
    BadCase("missing-file", None, ("no such file",)),
    BadCase("term-not-a-table", "term = [1]\n" + SPIN_CHAIN.split("[[term]]")[0],
            ("term[0]",)),
]


def write_case(case: BadCase, directory) -> str:
    """The path of the case's model file (not created for ``missing-file``)."""
    path = directory / f"{case.name}.toml"
    if case.text is not None:
        path.write_text(case.text)
    return str(path)


def key_missing(message: str, keys) -> list:
    """The entries of ``keys`` that ``message`` does not mention."""
    return [key for key in keys if key not in message]
