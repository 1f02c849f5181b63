"""The model: lattice, site type, labelled terms, sector, parameters and the H0 / V split."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Mapping

from lowfold.model.complex_form import ComplexForm
from lowfold.model.sector import Sector, check_sector_symmetry
from lowfold.errors import ModelError
from lowfold.model.hermiticity import check_hermitian_terms
from lowfold.model.lattice import Lattice, make_lattice
from lowfold.model.sites import Site, check_state_space
from lowfold.model.terms import Term, check_label, check_strength, expand_term

__all__ = ["Model", "PerturbationSpec"]


@dataclass(frozen=True)
class PerturbationSpec:
    """The ``[perturbation]`` table: which terms make H0, the order, and the manifold.

    ``manifold = "lowest"`` takes the lowest degenerate level of H0 (relative tolerance
    ``tolerance``); ``window = (emin, emax)`` takes every H0 level inside the window.
    H0 is the sum of the terms ``unperturbed`` names, each once (a repeated label is a
    ``ModelError``: it would count the term twice).  ``filling = "mixed"`` (infinite lattices)
    keeps every particle number of the lowest one-site level of H0 in the manifold (the
    doped Mott insulator {0, up, down}); by default one filling per site is chosen
    (``lowfold.jobs.lattice.one_site_filling``).
    """

    unperturbed: tuple[str, ...]
    order: int = 2
    manifold: str | None = "lowest"
    window: tuple[float, float] | None = None
    tolerance: float = 1e-9
    filling: str | None = None

    def __post_init__(self):
        if isinstance(self.unperturbed, str):
            raise ModelError("perturbation.unperturbed: must be a list of term labels, "
                             f"not the string {self.unperturbed!r}")
        object.__setattr__(self, "unperturbed", tuple(self.unperturbed))
        for index, label in enumerate(self.unperturbed):
            if label in self.unperturbed[:index]:
                raise ModelError(f"perturbation.unperturbed: {label!r} is listed twice; "
                                 "name each term of H0 once")
        if self.filling not in (None, "mixed"):
            raise ModelError(f"perturbation.filling: must be \"mixed\" (every particle number "
                             f"of the lowest one-site level), got {self.filling!r}")


@dataclass(frozen=True)
class Model:
    """A lattice model, immutable: ``with_parameters`` / ``with_lattice`` return new models.

    Conventions (hbar = 1, S = sigma/2, fermion and spin encodings) are those of
    ``lowfold.model.sites`` and the README.  Construction validates everything that can be
    decided without building a basis: ``SizeError`` when the states would not fit one int64
    (``lowfold.model.sites.check_state_space``), ``ModelError`` for any invalid term and
    for terms that do not sum to a Hermitian operator (``lowfold.model.hermiticity``).
    Term labels and parameter names are one printable line; ``title`` is any text and is
    kept exactly as given (whoever displays it escapes it for the display).

    A parameter given as a :class:`~lowfold.model.complex_form.ComplexForm` (parts that name
    real parameters, ``{abs = "t", phase = "phi"}``) moves to ``forms``; ``parameters``
    holds its value, computed again whenever the parameters it names change.
    """

    lattice: Lattice
    site: Site
    terms: tuple[Term, ...]
    sector: Sector = Sector()
    parameters: Mapping[str, float] = field(default_factory=dict)
    perturbation: PerturbationSpec | None = None
    title: str = ""
    source: str = "<model>"
    forms: Mapping[str, ComplexForm] = field(default_factory=dict)

    def __post_init__(self):
        _resolve_forms(self)
        check_state_space(self.site, self.lattice.n_sites)     # SizeError: states must fit int64
        for name, value in self.parameters.items():
            check_label(name, "parameters: name")
            check_strength(value, f"parameters.{name}")
        if not isinstance(self.title, str):
            raise ModelError(f"title: must be a string, got {self.title!r}")
        labels = [t.label for t in self.terms]
        for label in labels:
            if labels.count(label) > 1:
                raise ModelError(f"term label {label!r} is used twice; labels must be unique")
        for term in self.terms:      # validates strengths, selectors and operator names
            try:
                expand_term(term, self.strength(term), self.lattice, self.site, self.parameters)
            except ModelError as exc:
                prefix = f"term {term.label!r}"
                raise ModelError(str(exc) if str(exc).startswith(prefix) else f"{prefix}: {exc}") from None
        check_hermitian_terms(self)
        check_sector_symmetry(self)
        if self.lattice.infinite:
            _check_infinite_hopping(self)
        if self.perturbation is not None:
            for label in self.perturbation.unperturbed:
                if label not in labels:
                    raise ModelError(f"perturbation.unperturbed names {label!r}, which is not "
                                     f"a term label (labels: {', '.join(labels)})")

    @property
    def n_sites(self) -> int:
        return self.lattice.n_sites

    def term(self, label: str) -> Term:
        for term in self.terms:
            if term.label == label:
                return term
        raise ModelError(f"no term labelled {label!r}")

    def term_key(self, label: str) -> str:
        """Where a term sits in the model file, e.g. ``term[2] (tilt)``."""
        for index, term in enumerate(self.terms):
            if term.label == label:
                return f"term[{index}] ({label})"
        return f"term {label!r}"

    def strength(self, term: Term) -> float:
        """Numeric strength of ``term`` (a number, or a parameter's value)."""
        if isinstance(term.strength, str):
            if term.strength not in self.parameters:
                raise ModelError(f"term {term.label!r}: strength names parameter "
                                 f"{term.strength!r}, which is not defined in [parameters]")
            return check_strength(self.parameters[term.strength], f"parameters.{term.strength}")
        return check_strength(term.strength, f"term {term.label!r}: strength")

    def products(self, labels=None):
        """Expanded local-operator products of the named terms (default: all), as
        ``[(label, [(coefficient, ((operator, site), ...)), ...]), ...]`` (on a site with
        kept states, the compiled strings act as ``P O P``: :mod:`lowfold.build.kept_states`)."""
        chosen = self.terms if labels is None else [self.term(label) for label in labels]
        return [(t.label, expand_term(t, self.strength(t), self.lattice, self.site, self.parameters))
                for t in chosen]

    @property
    def unperturbed_labels(self) -> tuple[str, ...]:
        if self.perturbation is None:
            raise ModelError(f"{self.source}: the model has no [perturbation] table naming "
                             "the unperturbed terms")
        return self.perturbation.unperturbed

    @property
    def perturbation_labels(self) -> tuple[str, ...]:
        h0 = set(self.unperturbed_labels)
        return tuple(t.label for t in self.terms if t.label not in h0)

    def with_parameters(self, values: Mapping[str, float] | None = None, **more) -> "Model":
        """A copy with some parameters changed (unknown names are an error)."""
        values = {**(values or {}), **more}
        unknown = [k for k in values if k not in self.parameters]
        if unknown:
            raise ModelError(f"unknown parameter(s) {', '.join(unknown)} "
                             f"(defined: {', '.join(self.parameters) or 'none'})")
        for name in values:
            if name in self.forms:
                form = self.forms[name]
                raise ModelError(f"parameters.{name}: computed from {', '.join(form.names)} "
                                 f"({name} = {form}); change those instead")
        return replace(self, parameters={**self.parameters, **values})

    def with_lattice(self, *, size=None, boundary=None) -> "Model":
        """A copy on a lattice of another size or boundary (same shape)."""
        lat = self.lattice
        if lat.shape == "graph":
            raise ModelError("a graph lattice has no size to change")
        new = make_lattice(lat.shape, lat.size if size is None else size,
                           lat.boundary if boundary is None else boundary)
        return replace(self, lattice=new)

    def with_sector(self, sector: Sector) -> "Model":
        return replace(self, sector=sector)

    @property
    def is_complex(self) -> bool:
        """Whether some term has a complex amplitude (complex strength, Peierls phase or
        spin-orbit part): the Hamiltonian is then built as complex128, else as float64."""
        return any(isinstance(c, complex) and c.imag != 0
                   for _, products in self.products() for c, _ in products)


def _resolve_forms(model: Model) -> None:
    """Move :class:`ComplexForm` parameters to ``model.forms`` and put their values, from
    the real parameters they name, into ``model.parameters`` (both read-only)."""
    values = dict(model.parameters)
    forms = dict(model.forms)
    forms.update({name: v for name, v in values.items() if isinstance(v, ComplexForm)})
    named = {**values, **forms}          # a form naming a form is told it names a complex one
    for name, form in forms.items():
        values[name] = form.value(named, f"parameters.{name}")
    object.__setattr__(model, "parameters", MappingProxyType(values))
    object.__setattr__(model, "forms", MappingProxyType(forms))


def directed_hopping(model: Model, term) -> bool:
    """Whether a hopping term has a direction on its bonds: a complex strength or a
    spin-orbit part (``T^ji = (T^ij)^dagger`` differs from ``T^ij``)."""
    return term.type == "hopping" and (term.soc is not None
                                       or isinstance(model.strength(term), complex))


def _check_infinite_hopping(model: Model) -> None:
    """Flux and explicit phases have no translation-invariant form on an infinite lattice
    (a uniform field's Peierls phases depend on the position in any gauge); a complex or
    spin-orbit hopping on a bond class is translation invariant, its bonds taken along the
    translations (the linked-cluster graphs keep their direction)."""
    for term in model.terms:
        if term.phases is not None or term.flux is not None:
            raise ModelError(f"term {term.label!r}: a flux or explicit phases are not supported "
                             "on an infinite lattice (the Peierls phases of a field are not "
                             "translation invariant); use a finite cluster")
