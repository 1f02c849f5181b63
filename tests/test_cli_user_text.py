"""User text on the screen: titles, file names and labels are printed as written.

rich reads square brackets as markup: an unmatched closing tag (``"a [/bold] b"``) used to
crash every human-readable output with ``MarkupError``, and a well-formed tag
(``"[bold red]x"``) was silently swallowed as a style.  A trailing backslash would escape
the closing tag that follows it, and ``:smile:`` would become an emoji.  Error lines must
stay on one line even when the file name holds a newline.  All commands of this module run
the installed ``lowfold`` script at once (a thread pool of subprocesses).
"""

from __future__ import annotations

import pytest

from helpers.cli import one_line_error, run_all, succeeded
from helpers.modelfiles import hubbard_text

TITLES = {  # name: the title as the user means it (TOML-escaped when written)
    "unmatched-close": "a [/bold] b",
    "unclosed-open": "[bold red",
    "well-formed-tag": "[bold red]x[/bold red] y",
    "trailing-backslash": "ends in \\",
    "emoji-code": "dots :smile: here",
}

# every title through derive (the fullest screen); one through every command
COMMANDS = {name: ("derive",) for name in TITLES}
COMMANDS["unmatched-close"] = ("spectrum", "derive", "series")
CASES = [(name, command) for name in sorted(TITLES) for command in COMMANDS[name]]


def toml_string(text: str) -> str:
    """``text`` inside a TOML basic string (backslashes doubled)."""
    return text.replace("\\", "\\\\")


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("titles")
    jobs = {}
    for name, title in TITLES.items():
        # two-site Hubbard model, U as H0 and the hopping as V: derive and series both apply
        path = directory / f"{name}.toml"
        path.write_text(hubbard_text("chain", [2], order=2, title=toml_string(title)))
        for command in COMMANDS[name]:
            jobs[(name, command)] = [command, path]
    # a bad file whose name holds markup and a newline: the error names it on one line
    odd = directory / "bad[bold]\nname.toml"
    odd.write_text("title = 3\n")
    jobs["odd-name"] = ["spectrum", odd]
    jobs["missing-odd-name"] = ["spectrum", directory / "gone[/x]\tname.toml"]
    return run_all(jobs)


@pytest.mark.parametrize("name, command", CASES)
def test_title_is_printed_as_written(runs, name, command):
    out = succeeded(runs[(name, command)])
    assert TITLES[name] in out, out


def test_well_formed_tag_is_not_read_as_style(runs):
    # the brackets appear literally, not just the text between them
    out = succeeded(runs[("well-formed-tag", "derive")])
    assert "[bold red]x[/bold red] y" in out


def test_error_naming_an_odd_file_is_one_line(runs):
    line = one_line_error(runs["odd-name"])
    assert "bad[bold]\\nname.toml" in line and "title" in line


def test_error_naming_a_missing_odd_file_is_one_line(runs):
    line = one_line_error(runs["missing-odd-name"])
    assert "gone[/x]\\tname.toml" in line
