"""Complex numbers in model files: the two TOML forms of a complex strength or parameter.

TOML has no complex numbers, so a complex value is an inline table (docs/model-files.md,
"Complex strengths"):

- ``{re = 1.0, im = 0.5}``: real and imaginary part;
- ``{abs = 1.0, phase = 0.5}``: modulus ``abs >= 0`` and phase in radians,
  ``abs * exp(i * phase)``.

Both keys of a form are required and the forms cannot be mixed.  In ``[parameters]`` a part
may also be the name of another, real parameter (``tc = {abs = "t", phase = "phi"}``): the
parameter is then a :class:`ComplexForm`, whose value follows the parameters it names (a
scan over ``t`` or ``phi`` scans ``tc``).  A plain number stays a
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
>>> form = parse_parameter({"abs": "t", "phase": 0.0}, "parameters.tc")
>>> form.value({"t": 2.0}, "parameters.tc")
2.0
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass

from lowfold.errors import ModelError

__all__ = ["parse_number", "parse_parameter", "is_complex_form", "plain", "ComplexForm"]

_FORMS = ({"re", "im"}, {"abs", "phase"})


def is_complex_form(value) -> bool:
    """Whether ``value`` is a TOML table meant as a complex number (any table is: a table
    with the wrong keys is refused by :func:`parse_number` with a message that says how)."""
    return isinstance(value, dict)


def _real(value, where: str) -> float:
    if isinstance(value, str):
        raise ModelError(f"{where}: must be a finite number, got {value!r} (a parameter name "
                         "as a part: define the complex value in [parameters] and name it)")
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
    form = _form_keys(value, where)
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


def _form_keys(value: dict, where: str) -> set:
    keys = set(value)
    form = next((f for f in _FORMS if keys == f), None)
    if form is None:
        raise ModelError(f"{where}: a complex number is {{re = ..., im = ...}} or "
                         f"{{abs = ..., phase = ...}} (phase in radians), got the keys "
                         f"{', '.join(sorted(map(str, keys))) or 'none'}")
    return form


@dataclass(frozen=True)
class ComplexForm:
    """A complex parameter written with parameter names as parts, e.g. ``{abs = "t", phase =
    "phi"}``: its value is that of :func:`parse_number` on the parts, each name replaced by
    the (real) value of the parameter it names.

    ``keys`` is ``("re", "im")`` or ``("abs", "phase")``; ``parts`` the two parts in that
    order, numbers or names.
    """

    keys: tuple[str, str]
    parts: tuple

    @property
    def names(self) -> tuple[str, ...]:
        """The parameters the form names."""
        return tuple(p for p in self.parts if isinstance(p, str))

    def value(self, parameters, where: str) -> float | complex:
        """The complex number for the real ``parameters`` (name -> value).

        Raises
        ------
        ModelError
            A named parameter that is missing, complex or itself a form; a negative modulus.
        """
        numbers = {}
        for key, part in zip(self.keys, self.parts):
            if isinstance(part, str):
                if part not in parameters:
                    raise ModelError(f"{where}.{key}: parameter {part!r} is not defined in "
                                     "[parameters]")
                number = parameters[part]
                if isinstance(number, ComplexForm) or complex(number).imag != 0:
                    raise ModelError(f"{where}.{key}: parameter {part!r} is complex; the parts "
                                     "of a complex parameter name real parameters")
                part = float(complex(number).real)
            numbers[key] = part
        return parse_number(numbers, where)

    def __str__(self) -> str:
        shown = (f'"{p}"' if isinstance(p, str) else repr(p) for p in self.parts)
        return "{" + ", ".join(f"{k} = {v}" for k, v in zip(self.keys, shown)) + "}"


def parse_parameter(value, where: str) -> float | complex | ComplexForm:
    """A ``[parameters]`` value: a number (:func:`parse_number`), or a complex form with a
    parameter name as one or both parts (a :class:`ComplexForm`, whose names are checked
    when the model is made)."""
    if not is_complex_form(value) or not any(isinstance(v, str) for v in value.values()):
        return parse_number(value, where)
    form = _form_keys(value, where)
    keys = ("re", "im") if form == {"re", "im"} else ("abs", "phase")
    parts = []
    for key in keys:
        part = value[key]
        if isinstance(part, str):
            if not part or not part.isprintable():
                raise ModelError(f"{where}.{key}: {part!r} is not a parameter name")
            parts.append(part)
        else:
            parts.append(_real(part, f"{where}.{key}"))
    return ComplexForm(keys, tuple(parts))
