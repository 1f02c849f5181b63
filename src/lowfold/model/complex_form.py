"""Complex numbers in model files: the two TOML forms of a complex strength or parameter.

TOML has no complex numbers, so a complex value is an inline table (docs/model-files.md,
"Complex strengths"):

- ``{re = 1.0, im = 0.5}``: real and imaginary part;
- ``{abs = 1.0, phase = 0.5}``: modulus ``abs >= 0`` and phase in radians,
  ``abs * exp(i * phase)``.

Both keys of a form are required and the forms cannot be mixed.  A plain number stays a
float, and so does a complex form whose imaginary part is exactly zero (``{re = 2, im =
0}`` is the float 2.0, so that a real model written in complex form keeps the real, fast
route of the kernels); ``{abs = 1, phase = 0}`` is 1.0 as well, and a part of a polar form
below ``1e-15 * abs`` (the round-off of ``cos`` and ``sin``: ``phase = 3.141592653589793``)
is taken as zero.

Examples
--------
>>> parse_number({"re": 1.0, "im": 0.5}, "parameters.t")
(1+0.5j)
>>> parse_number({"re": 2, "im": 0}, "parameters.t")
2.0
>>> parse_number(3, "parameters.U")
3.0
"""

from __future__ import annotations

import cmath
import math

from lowfold.errors import ModelError

__all__ = ["parse_number", "is_complex_form", "plain"]

_FORMS = ({"re", "im"}, {"abs", "phase"})


def is_complex_form(value) -> bool:
    """Whether ``value`` is a TOML table meant as a complex number (any table is: a table
    with the wrong keys is refused by :func:`parse_number` with a message that says how)."""
    return isinstance(value, dict)


def _real(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ModelError(f"{where}: must be a finite number, got {value!r}")
    return float(value)


def plain(value: complex) -> float | complex:
    """``value`` as a float when its imaginary part is exactly zero, else as a complex."""
    value = complex(value)
    return value.real if value.imag == 0 else value


def parse_number(value, where: str) -> float | complex:
    """A model-file number: a plain finite number, or one of the two complex forms (or,
    in a document built in Python for :func:`lowfold.parse_model`, a Python complex).

    Raises
    ------
    ModelError
        Not a number or a table of one of the two forms; a missing, extra or mixed key; a
        part that is not a finite number; a negative ``abs``.  The message starts with
        ``where`` and shows the two forms.
    """
    if isinstance(value, complex):          # a document built in Python, not read from TOML
        if not (math.isfinite(value.real) and math.isfinite(value.imag)):
            raise ModelError(f"{where}: must be a finite number, got {value!r}")
        return plain(value)
    if not is_complex_form(value):
        return _real(value, where)
    keys = set(value)
    form = next((f for f in _FORMS if keys == f), None)
    if form is None:
        raise ModelError(f"{where}: a complex number is {{re = ..., im = ...}} or "
                         f"{{abs = ..., phase = ...}} (phase in radians), got the keys "
                         f"{', '.join(sorted(map(str, keys))) or 'none'}")
    if form == {"re", "im"}:
        return plain(complex(_real(value["re"], f"{where}.re"), _real(value["im"], f"{where}.im")))
    size = _real(value["abs"], f"{where}.abs")
    phase = _real(value["phase"], f"{where}.phase")
    if size < 0:
        raise ModelError(f"{where}.abs: the modulus must be >= 0, got {size!r} "
                         "(add pi to the phase instead)")
    if phase == 0 or size == 0:
        return size
    z = cmath.rect(size, phase)
    # round-off of the trigonometric functions (phase = pi gives -1 + 1.2e-16j): snapped
    re, im = (0.0 if abs(part) <= 1e-15 * size else part for part in (z.real, z.imag))
    return plain(complex(re, im))
