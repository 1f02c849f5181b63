"""Text of the ``where`` slices of ``lowfold plot``: ``AXIS=VALUE`` items to a dict.

This parses command-line text and belongs at the CLI boundary; it lives here, on its own,
until the CLI folder takes it.
"""

from __future__ import annotations

from typing import Any, Iterable

from lowfold.errors import ModelError

__all__ = ["parse_where"]


def parse_where(items: Iterable[str]) -> dict[str, Any]:
    """``["size=4", "U=20", "boundary=open", "size=4x2"]`` -> a ``where`` dict (for the CLI)."""
    where: dict[str, Any] = {}
    for item in items:
        name, sep, text = item.partition("=")
        name, text = name.strip(), text.strip()
        if not sep or not name or not text:
            raise ModelError(f"--where: expected AXIS=VALUE, got {item!r}")
        if name == "size":
            try:
                where[name] = [int(n) for n in text.lower().split("x")]
            except ValueError:
                raise ModelError(f"--where: size must look like 6 or 4x2, got {text!r}") from None
            continue
        try:
            where[name] = float(text)
        except ValueError:
            where[name] = text
    return where
