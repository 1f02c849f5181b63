"""Couplings as formulas in the model's two energy scales: ``4 t^2/U - 16 t^4/U^3``.

When V has one named strength ``t`` and H0 one named strength ``U``
(:func:`~lowfold.readout.rationals.single_ratio`), the order-``m`` contribution of a coupling
is ``c_m t^m / U^(m-1)`` with a dimensionless ``c_m`` that is a rational number whenever every
intermediate energy is a rational multiple of ``U`` (superexchange ``4 t^2/U``, P. W.
Anderson, Phys. Rev. 115, 2 (1959); its fourth order ``-16 t^4/U^3`` on the chain,
M. Takahashi, J. Phys. C 10, 1289 (1977)).  This module writes the recognised ``c_m`` of all
orders as one formula, in plain text and in LaTeX.

Conventions
-----------
- Orders ascend; orders whose ``c_m`` is zero (``|c_m| <= 1e-9``) are omitted.
- Text: ``c t^m/U^(m-1)`` with ``c`` an integer or ``p/q`` (``3/2 t^4/U^3``), the factor
  ``1`` left out (``t^2/U``), ``U`` at order 0 and ``t`` at order 1; terms joined by
  ``" + "`` and ``" - "``, a leading minus written ``-``.  Read as ``c * t**m / U**(m-1)``.
- LaTeX: ``\\frac{4 t^{2}}{U} - \\frac{3 t^{4}}{2 U^{3}}``; a parameter named like a Greek
  letter (``Delta``) becomes its command (``\\Delta``), ``t_pd`` becomes ``t_{pd}``.
- ``None`` when the model has no single ratio, a strength is zero, a value is not a scalar
  (DM vectors, anisotropy tensors) or one non-zero order is not recognised (denominator at
  most 64, relative tolerance 1e-7, as :func:`~lowfold.readout.rationals.recognise_couplings`).

Exact rational arithmetic uses :class:`fractions.Fraction`: a formula is a sum of monomials
of one fixed form, so a computer-algebra system would add a dependency and nothing else.
"""

from __future__ import annotations

import math
from fractions import Fraction
from typing import Mapping

from lowfold.model.model import Model
from lowfold.readout.rationals import recognise_rational, single_ratio

__all__ = ["formula_coefficients", "coupling_formula", "latex_formula", "latex_hamiltonian"]

_ZERO = 1e-9             # |c_m| at or below this is an absent order
_GREEK = frozenset("alpha beta gamma delta epsilon zeta eta theta iota kappa lambda mu nu xi "
                   "pi rho sigma tau upsilon phi chi psi omega Gamma Delta Theta Lambda Xi Pi "
                   "Sigma Upsilon Phi Psi Omega".split())


def formula_coefficients(model: Model, orders: Mapping[int, object]
                         ) -> tuple[str, str, dict[int, Fraction]] | None:
    """``(t, U, {m: c_m})``: the names of the two scales and the recognised ``c_m``.

    Parameters
    ----------
    model : Model
        Supplies the parameter names (:func:`single_ratio`) and their values.
    orders : mapping int -> float
        Each order's contribution at the model's parameter values (integer keys).

    Returns
    -------
    tuple or None
        ``(name of V's strength, name of H0's strength, {m: Fraction})`` with zero orders
        left out, or ``None`` (see the module docstring).
    """
    ratio = single_ratio(model)
    if ratio is None:
        return None
    small, large = ratio
    t, u = float(model.parameters[small]), float(model.parameters[large])
    if t == 0 or u == 0 or not (math.isfinite(t) and math.isfinite(u)):
        return None
    found = {}
    for m in sorted(int(k) for k in orders):
        value = orders[m] if m in orders else orders[str(m)]
        if isinstance(value, (list, tuple)) or hasattr(value, "shape") and value.shape != ():
            return None
        scale = t**m / u ** (m - 1)
        if abs(float(value) / scale) <= _ZERO:
            continue
        fraction = recognise_rational(float(value), scale, max_denominator=64, rtol=1e-7)
        if fraction is None:
            return None
        found[m] = fraction
    return small, large, found


def _power(name: str, n: int, latex: bool) -> str:
    if n == 1:
        return name
    return f"{name}^{{{n}}}" if latex else f"{name}^{n}"


def _text_term(c: Fraction, m: int, t: str, u: str) -> str:
    numerator = _power(t, m, False) if m >= 1 else u
    monomial = numerator if m <= 1 else f"{numerator}/{_power(u, m - 1, False)}"
    magnitude = abs(c)
    return monomial if magnitude == 1 else f"{magnitude} {monomial}"


def _latex_symbol(name: str) -> str:
    head, _, tail = name.partition("_")
    head = f"\\{head}" if head in _GREEK else head
    return f"{head}_{{{tail}}}" if tail else head


def _latex_term(c: Fraction, m: int, t: str, u: str) -> str:
    top = [str(c.numerator)] if abs(c.numerator) != 1 else []
    bottom = [str(c.denominator)] if c.denominator != 1 else []
    top.append(_power(t, m, True) if m >= 1 else u)
    if m >= 2:
        bottom.append(_power(u, m - 1, True))
    top = " ".join(top).lstrip("-")
    return f"\\frac{{{top}}}{{{' '.join(bottom)}}}" if bottom else top


def _joined(terms: list[tuple[Fraction, str]]) -> str:
    if not terms:
        return "0"
    out = ""
    for n, (c, text) in enumerate(terms):
        if n == 0:
            out = f"-{text}" if c < 0 else text
        else:
            out += f" - {text}" if c < 0 else f" + {text}"
    return out


def coupling_formula(model: Model, orders: Mapping[int, object]) -> str | None:
    """The coupling as ``c_2 t^2/U + c_4 t^4/U^3 + ...`` in the model's parameter names.

    Parameters
    ----------
    model : Model
        The model the coupling was derived from.
    orders : mapping int -> float
        Each order's contribution at the model's parameter values.

    Returns
    -------
    str or None
        The formula (module docstring), ``"0"`` when every order is zero, ``None`` when it
        cannot be written.

    Examples
    --------
    >>> from lowfold.model.modelfile import parse_model
    >>> model = parse_model({
    ...     "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
    ...     "sector": {"particles": 2}, "parameters": {"t": 0.1, "U": 8.0},
    ...     "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
    ...              {"type": "hubbard", "strength": "U"}],
    ...     "perturbation": {"unperturbed": ["hubbard"], "order": 4}})
    >>> coupling_formula(model, {2: 4 * 0.1**2 / 8, 3: 0.0, 4: -16 * 0.1**4 / 8**3})
    '4 t^2/U - 16 t^4/U^3'
    >>> coupling_formula(model, {1: -0.1, 4: 1.5 * 0.1**4 / 8**3})
    '-t + 3/2 t^4/U^3'
    """
    found = formula_coefficients(model, orders)
    if found is None:
        return None
    t, u, coefficients = found
    return _joined([(c, _text_term(c, m, t, u)) for m, c in coefficients.items()])


def latex_formula(model: Model, orders: Mapping[int, object]) -> str | None:
    """The formula of :func:`coupling_formula` in LaTeX (``\\frac{4 t^{2}}{U} - ...``).

    Examples
    --------
    >>> from lowfold.model.modelfile import parse_model
    >>> model = parse_model({
    ...     "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
    ...     "sector": {"particles": 2}, "parameters": {"t": 0.1, "U": 8.0},
    ...     "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
    ...              {"type": "hubbard", "strength": "U"}],
    ...     "perturbation": {"unperturbed": ["hubbard"], "order": 4}})
    >>> print(latex_formula(model, {2: 4 * 0.1**2 / 8, 4: -1.5 * 0.1**4 / 8**3}))
    \\frac{4 t^{2}}{U} - \\frac{3 t^{4}}{2 U^{3}}
    """
    found = formula_coefficients(model, orders)
    if found is None:
        return None
    t, u, coefficients = found
    t, u = _latex_symbol(t), _latex_symbol(u)
    return _joined([(c, _latex_term(c, m, t, u)) for m, c in coefficients.items()])


# --------------------------------------------------------------------------- the Hamiltonian

_PAIR_SUMS = {"nearest": r"\langle ij \rangle", "next-nearest": r"\langle\langle ij \rangle\rangle",
              "third": r"\langle\langle\langle ij \rangle\rangle\rangle"}
_PAIR_INDEX = {"nearest": "1", "next-nearest": "2", "third": "3"}
_SYMBOL = {"constant": "e_0", "field": r"\mathbf{h}", "exchange": "J", "dm": r"\mathbf{D}",
           "anisotropy": r"\Gamma", "chirality": r"\chi", "ring": "K", "pauli": "c"}
_S = {k: rf"\mathbf{{S}}_{k}" for k in "ijkl"}


def _where(name: str) -> str:
    if name in _PAIR_SUMS:
        return _PAIR_SUMS[name]
    if name == "4-cycle":
        return r"\square"
    if name == "triangle":
        return r"\triangle"
    return rf"\text{{{name}}}"


# kinds of the local-operator readout (readout/local_names.py): symbol and summand
_LOCAL_SYMBOL = {"hopping": "t", "three-site": "K_3", "density": "V", "single-ion": "D",
                 "biquadratic": "B", "particle-hopping": "t_p", "hole-hopping": "t_h",
                 "particle-energy": r"\epsilon_p", "hole-energy": r"\epsilon_h",
                 "particle-interaction": "W_{pp}", "hole-interaction": "W_{hh}",
                 "particle-hole-interaction": "W_{ph}"}
_LOCAL_BODY = {
    "hopping": r"(-1) \sum_\sigma P (c^\dagger_{i\sigma} c_{j\sigma} + \mathrm{h.c.}) P",
    "three-site": r"(-1) \sum_\sigma P (c^\dagger_{i\sigma} n_{j\bar\sigma} c_{k\sigma} "
                  r"- c^\dagger_{i\sigma} c^\dagger_{j\bar\sigma} c_{j\sigma} c_{k\bar\sigma}"
                  r" + \mathrm{h.c.}) P",
    "density": r"n_i n_j",
    "single-ion": r"(S^z_i)^2",
    "biquadratic": r"(\mathbf{S}_i \cdot \mathbf{S}_j)^2",
    "particle-hopping": r"(-1) (X^{pb}_i X^{bp}_j + \mathrm{h.c.})",
    "hole-hopping": r"(-1) (X^{hb}_i X^{bh}_j + \mathrm{h.c.})",
    "particle-energy": r"X^{pp}_i", "hole-energy": r"X^{hh}_i",
    "particle-interaction": r"X^{pp}_i X^{pp}_j", "hole-interaction": r"X^{hh}_i X^{hh}_j",
    "particle-hole-interaction": r"X^{pp}_i X^{hh}_j",
}


def _x_operators(label: str) -> str:
    """``|u><0|_0 |0><u|_1`` as ``X^{u0}_0 X^{0u}_1`` (a comma between labels longer than
    one character: ``X^{+1,0}_0``)."""
    out = []
    for part in label.split():
        states, _, site = part.rpartition("_")
        a, b = states[1:-1].split("><")
        out.append(rf"X^{{{a}{',' if max(len(a), len(b)) > 1 else ''}{b}}}_{{{int(site)}}}")
    return " ".join(out)


def _operator(kind: str, name: str, letters: str | None) -> str:
    i, j, k, l = (_S[x] for x in "ijkl")
    if kind == "string":
        return rf"\sum_{{{_where(name)}}} {_x_operators(letters or '')}"
    if kind in _LOCAL_BODY:
        return rf"\sum_{{{_where(name)}}} {_LOCAL_BODY[kind]}"
    if kind == "field":
        return rf"\sum_i {_SYMBOL['field']} \cdot {i}"
    body = {
        "exchange": rf"{i} \cdot {j}",
        "dm": rf"{_SYMBOL['dm']} \cdot ({i} \times {j})",
        "anisotropy": r"S^a_i \Gamma_{ab} S^b_j",
        "chirality": rf"{i} \cdot ({j} \times {k})",
        "ring": rf"\left[({i} \cdot {j})({k} \cdot {l}) + ({i} \cdot {l})({j} \cdot {k}) "
                rf"- ({i} \cdot {k})({j} \cdot {l})\right]",
        "pauli": " ".join(rf"\sigma^{{{x.lower()}}}_{{{n + 1}}}"
                          for n, x in enumerate((letters or "").split())),
    }[kind]
    return rf"\sum_{{{_where(name)}}} {body}"


def latex_hamiltonian(model: Model, classes) -> str:
    """The effective Hamiltonian of coupling classes as LaTeX equations, ready for a paper.

    ``H = N e_0 + J_1 \\sum_{\\langle ij \\rangle} \\mathbf{S}_i \\cdot \\mathbf{S}_j + ...``
    (``N`` sites, ``e_0`` the constant per site, ``J_1, J_2, J_3`` the nearest, next-nearest
    and third-neighbour exchange, ``K`` the ring exchange of ``readout.couplings``, ``\\chi``
    the scalar chirality, vectors and tensors named ``\\mathbf{h}``, ``\\mathbf{D}``,
    ``\\Gamma``; a second class of the same kind and name gets a prime), then one line per
    coefficient: its formula (:func:`latex_formula`) when there is one, else its value.
    A ``string`` class is ``x_n`` times its X-operators ``X^{ab}_m = |a><b|`` on the
    member's sites numbered from 0 in the order of its positions (as in its label).
    Spin operators ``S = sigma/2``; each sum runs over the members of the class once.

    Parameters
    ----------
    model : Model
        The model derived (parameter names of the formulas).
    classes : sequence of CouplingClass
        Objects with ``kind``, ``name``, ``orders``, ``value`` and ``operator`` (duck-typed:
        readout does not import results).
    """
    terms, definitions, used = [], [], {}
    electrons_local = model.site.type == "electron" and any(c.kind in _LOCAL_BODY
                                                            for c in classes)
    for c in classes:
        symbol = _SYMBOL.get(c.kind, _LOCAL_SYMBOL.get(c.kind, "c"))
        if c.kind == "exchange":
            symbol = f"J_{{{_PAIR_INDEX.get(c.name, c.name)}}}" if c.name in _PAIR_INDEX \
                else rf"J_{{\text{{{c.name}}}}}"
        if c.kind == "string":             # numbered: there may be thousands
            used["string"] = used.get("string", 0) + 1
            symbol = f"x_{{{used['string']}}}"
        else:
            primes = used.get(symbol, 0)
            used[symbol] = primes + 1
            symbol += "'" * primes
        formula = latex_formula(model, c.orders) if not isinstance(c.value, list) else None
        if c.kind == "constant":
            terms.append(f"N {symbol}")
        elif c.kind in ("field", "dm", "anisotropy"):
            terms.append(_operator(c.kind, c.name, c.operator).replace(_SYMBOL[c.kind], symbol))
        elif c.kind == "exchange" and electrons_local:      # t-J: with its density part
            spin = r"\mathbf{S}_i \cdot \mathbf{S}_j"
            body = _operator(c.kind, c.name, c.operator).replace(spin,
                                                                  f"({spin} - n_i n_j / 4)")
            terms.append(f"{symbol} {body}")
        else:
            terms.append(f"{symbol} {_operator(c.kind, c.name, c.operator)}")
        value = formula if formula is not None else _latex_value(c.value)
        definitions.append(f"{symbol} &= {value}")
    lines = [r"\begin{align}", "H &= " + " \\nonumber\\\\\n  &\\quad + ".join(terms) + r" \\"]
    lines += [d + r" \\" for d in definitions[:-1]] + definitions[-1:]
    lines.append(r"\end{align}")
    return "\n".join(lines)


def _latex_value(value) -> str:
    if isinstance(value, list):
        rows = [v if isinstance(v, list) else [v] for v in value]
        body = r" \\ ".join(" & ".join(f"{float(x):.6g}" for x in row) for row in rows)
        return rf"\begin{{pmatrix}} {body} \end{{pmatrix}}"
    return f"{float(value):.6g}"
