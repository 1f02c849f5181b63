"""Input validation of the model layer through the Python API: every bad model is refused
with a typed exception (``ModelError`` or ``SizeError``) whose one-line message names the
file and the key, before anything large is allocated.

The same inputs are run through the installed command in ``test_model_input_cli.py``.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from lowfold import load_model
from lowfold.errors import ModelError
from lowfold.model.modelfile import read_toml

SPIN_CHAIN = """\
title = "Heisenberg chain"
[lattice]
shape = "chain"
size = [4]
[site]
type = "spin"
[[term]]
type = "exchange"
strength = 1.0
"""


def write(tmp_path: Path, text: str, name: str = "model.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def one_line(exc_info) -> str:
    message = str(exc_info.value)
    assert "\n" not in message and message.isprintable(), repr(message)
    return message


# ---------------------------------------------------------------------------------------
# reading the file


def test_latin1_file_is_a_model_error_with_the_byte_offset(tmp_path):
    # 'h\xe9p' is "hép" in Latin-1; TOML files are UTF-8 (TOML 1.0 specification).
    path = tmp_path / "latin1.toml"
    path.write_bytes(b'title = "h\xe9p"\n')
    with pytest.raises(ModelError) as exc:
        load_model(path)
    message = one_line(exc)
    assert message.startswith(str(path)) and "UTF-8" in message and "offset 10" in message


def test_directory_missing_and_not_a_directory_paths(tmp_path):
    cases = {tmp_path: "is a directory", tmp_path / "missing.toml": "no such file",
             write(tmp_path, SPIN_CHAIN) / "x.toml": "cannot be read"}
    for path, words in cases.items():
        with pytest.raises(ModelError) as exc:
            read_toml(path)
        message = one_line(exc)
        assert message.startswith(f"{path}: ") and words in message, message


def test_unreadable_file_is_a_model_error(tmp_path, monkeypatch):
    # the tests may run as root, for whom chmod 000 does not stop reading: raise the
    # error the operating system gives an unprivileged user instead
    path = write(tmp_path, SPIN_CHAIN)

    def refuse(self):
        raise PermissionError(13, "Permission denied", str(self))

    monkeypatch.setattr(Path, "read_bytes", refuse)
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc) == f"{path}: permission denied (the file is not readable)"


def test_file_name_with_a_newline_is_shown_escaped(tmp_path):
    path = write(tmp_path, "[site]\ntype = \"spin\"\n", name="a\nb.toml")
    with pytest.raises(ModelError) as exc:
        load_model(path)
    assert one_line(exc).startswith(repr(str(path)))
