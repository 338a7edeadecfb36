"""Take the formula away, several couplings: ``E(λ₁, λ₂) = Σ_{a+b<=K} E^(a,b) λ₁^a λ₂^b`` with its region.

:func:`multi_formula` is :func:`ptcheck.formula.formula` for a model with two
couplings: the multivariate Rayleigh–Schrödinger polynomial of a level (or a
quantity) as LaTeX (mathtext-readable), as a Python/sympy expression in the
two coupling variables, and as a small self-contained Python function whose
docstring states the model, the tolerance and where the formula holds.  Where
it holds is the validity region of :func:`ptcheck.region.validity_region`
(one per tolerance): summarised in words by the nearest boundary point and the
ranges along the two axes, and kept in full in :attr:`MultiFormula.regions`.

Coefficients that are simple fractions to machine precision are shown as such
(:func:`ptcheck.formula.simple_rational`).  A level in an exactly degenerate
group has no polynomial energy in two couplings (its first-order shift is an
eigenvalue of ``λ₁ PV₁P + λ₂ PV₂P``): its effective Hamiltonian is in
:attr:`ptcheck.multiseries.MultiSeriesResult.effective_hamiltonians`.
"""

from __future__ import annotations

import html
import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction
from types import MappingProxyType
from typing import Any

import numpy as np

from . import _validation as val
from .formula import (
    DEFAULT_RTOLS,
    LATEX_DIGITS,
    _check_variable,
    _join_terms,
    _py_fraction,
    _RESERVED,
    _tex_float,
    _tex_fraction,
    _tex_symbol,
    _tex_text,
    _term,
    _usable_name,
    simple_rational,
)
from .model import Model
from .multiseries import check_multi, multi_series
from .quantities import Quantity
from .region import ValidityRegion, validity_region
from .treatment import DEFAULT_TREATMENT

__all__ = ["MultiFormula", "multi_formula"]

#: Coefficients smaller than this fraction of the largest one of their total degree are rounding noise.
_NOISE_RTOL = 1e-12


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, repr=False, eq=False)
class MultiFormula:
    """A multivariate perturbative formula with its validity regions, as text for papers, slides and code.

    Attributes
    ----------
    model_name : str
    params : mapping or None
        Model parameters (builder keyword arguments), when known.
    target : str
        Level label or quantity name.
    order : int
        Total degree K (terms ``λ₁^a λ₂^b`` with ``a + b <= K``).
    variables : tuple of str
        Names of the couplings in :attr:`expression` and :attr:`python`.
    coefficients : (K + 1, K + 1) ndarray, read-only
        ``E^(a,b)`` (energy units), zero above total degree K.
    rationals : tuple of tuple
        Same shape: the coefficient as a :class:`~fractions.Fraction` where it
        is one to machine precision (``Fraction(0)``: zero to rounding), else None.
    regions : tuple of ValidityRegion
        One per tolerance (relative tolerances first).
    ranges : tuple of str
        One sentence per region (nearest boundary, ranges along the axes).
    equation : str
        The equation alone, one line of LaTeX/mathtext in ``$...$``.
    latex : str
        The equation with the validity sentences (one per line).
    expression : str
        The polynomial as Python/sympy text in :attr:`variables`.
    python : str
        Source of a pure-Python function ``<function_name>(<variables>)``.
    function_name : str
    exact_solves : int
    version : str
    notes : tuple of str
    """

    model_name: str
    params: Mapping | None
    target: str
    order: int
    variables: tuple
    coefficients: np.ndarray
    rationals: tuple
    regions: tuple
    ranges: tuple
    equation: str
    latex: str
    expression: str
    python: str
    function_name: str
    exact_solves: int
    version: str
    notes: tuple = ()

    def __repr__(self) -> str:
        expr = self.expression if len(self.expression) <= 70 else self.expression[:67] + "..."
        return f"MultiFormula({self.target}, total order {self.order}: {expr})"

    def to_dict(self) -> dict:
        return {
            "model": self.model_name,
            "params": None if self.params is None else {str(k): _json(v) for k, v in self.params.items()},
            "ptcheck_version": self.version,
            "target": self.target,
            "order": self.order,
            "variables": list(self.variables),
            "coefficients": self.coefficients.tolist(),
            "rationals": [[None if f is None else str(f) for f in row] for row in self.rationals],
            "regions": [r.to_dict() for r in self.regions],
            "ranges": list(self.ranges),
            "equation": self.equation,
            "latex": self.latex,
            "expression": self.expression,
            "python": self.python,
            "function_name": self.function_name,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        ranges = "".join(f"<li>{html.escape(r)}</li>" for r in self.ranges)
        return (
            f"<b>Formula</b> for {html.escape(self.target)} (model {html.escape(self.model_name)}), total order "
            f"{self.order}<p>{html.escape(self.equation)}</p><ul>{ranges}</ul>"
        )


def _json(x: Any) -> Any:
    if isinstance(x, np.generic):
        return x.item()
    if isinstance(x, (list, tuple)):
        return [_json(t) for t in x]
    return x


def multi_formula(
    model: Model,
    target: Any,
    order: int,
    *,
    tol: float | Sequence[float] | None = None,
    rtol: float | Sequence[float] | None = None,
    variables: Sequence[str] | None = None,
    directions: int = 16,
    max_directions: int = 48,
    max_coupling: float | None = None,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    params: Mapping[str, Any] | None = None,
) -> MultiFormula:
    """The multivariate perturbative formula of a level or quantity, with where it holds, as text.

    Parameters
    ----------
    model : Model
        Two couplings.
    target : level key or Quantity
    order : int
        Total degree K.
    tol, rtol : float or sequence of float, optional
        Tolerances (default :data:`ptcheck.formula.DEFAULT_RTOLS`: 1 % and 5 %).
    variables : (2,) sequence of str, optional
        Names of the couplings in the expression and the function (ASCII
        identifiers).  Default: the model's coupling names where usable, else
        ``lam1``, ``lam2``.
    directions, max_directions : int
        Rays of each region (:func:`ptcheck.region.validity_region`).
    max_coupling : float, optional
        Largest t searched on a ray (see :func:`ptcheck.region.validity_region`);
        give it when ‖V_i‖ of a truncated basis is much larger than the
        couplings that matter (e.g. oscillators).
    treatment, backend : str
        As in :func:`ptcheck.region.validity_region`.
    params : mapping, optional
        Model parameters for the docstring and ``to_dict()``.

    Returns
    -------
    MultiFormula

    Raises
    ------
    ValueError
        A level of the target is in an exactly degenerate group (no
        polynomial: see the module docstring).

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([-0.5, 0.5]), [[[0, 1], [1, 0]], [[1, 0], [0, -1]]], names=("x", "z"))
    >>> f = multi_formula(m, 0, 2, rtol=0.01, directions=4, max_directions=4)
    >>> f.expression
    '-1/2 + z - x**2'
    """
    from . import __version__

    check_multi(model, "multi_formula")
    if model.n_couplings != 2:
        raise ValueError(f"multi_formula exports formulas of two couplings; model {model.name!r} has {model.n_couplings}")
    if isinstance(target, (list, set, range, np.ndarray)):
        raise TypeError(f"multi_formula takes one level or quantity; got {target!r}")
    k = val.check_order(order, n=model.n)
    rtols = _tolerances(rtol, "rtol")
    tols = _tolerances(tol, "tol")
    if not rtols and not tols:
        rtols = DEFAULT_RTOLS
    names = _variables(model, variables)
    if params is None:
        params = getattr(model, "params", None)
    if params is not None and not isinstance(params, Mapping):
        raise TypeError(f"params must be a mapping of parameter names to values; got {params!r}")
    s = multi_series(model, target, k)
    if s.coefficients is None:
        raise ValueError(
            f"{s.target!r} involves an exactly degenerate group {list(s.groups)}: its energy is an eigenvalue of the "
            "group's effective Hamiltonian, not a polynomial in the couplings; see "
            "multi_series(model, target, order).effective_hamiltonians"
        )
    c = np.array(s.energy_coefficients, dtype=float)
    rationals, zero = _recognise(c, k)
    regions = [
        validity_region(model, target, k, directions=directions, max_directions=max_directions, treatment=treatment,
                        backend=backend, max_coupling=max_coupling, **tkw)
        for tkw in [{"rtol": t} for t in rtols] + [{"tol": t} for t in tols]
    ]
    texs = [_tex_symbol(n) for n in names]
    ranges = tuple(_range_sentence(r, names) for r in regions)
    ranges_tex = tuple(_range_sentence(r, texs, tex=True) for r in regions)
    poly_tex, poly_py = _polynomial(c, rationals, zero, k, texs, names)
    is_q = isinstance(target, Quantity)
    lhs = _tex_text(s.target) if is_q else f"E_{{{_tex_text(s.target)}}}"
    equation = f"${lhs}({', '.join(texs)}) = {poly_tex}$"
    latex = "\n".join([equation] + [f"{r}" for r in ranges_tex])
    fname = _function_name(s.target, is_q)
    python = _python_source(fname, names, poly_py, model=model, target=s.target, order=k, ranges=ranges,
                            params=params, version=__version__)
    notes = []
    for r in regions:
        for nt in r.notes:
            if nt not in notes:
                notes.append(nt)
    return MultiFormula(
        model_name=model.name,
        params=None if params is None else MappingProxyType(dict(params)),
        target=s.target,
        order=k,
        variables=names,
        coefficients=_ro(c),
        rationals=rationals,
        regions=tuple(regions),
        ranges=ranges,
        equation=equation,
        latex=latex,
        expression=poly_py,
        python=python,
        function_name=fname,
        exact_solves=int(sum(r.exact_solves for r in regions)),
        version=__version__,
        notes=tuple(notes),
    )


def _tolerances(x: Any, name: str) -> tuple[float, ...]:
    if x is None:
        return ()
    items = list(x) if isinstance(x, (list, tuple, np.ndarray)) else [x]
    return tuple(float(val.check_positive(t, name)) for t in items)


def _variables(model: Model, variables: Any) -> tuple[str, str]:
    if variables is None:
        out = tuple(n if _usable_name(n) and n not in _RESERVED else f"lam{i + 1}" for i, n in enumerate(model.coupling_names))
    else:
        if isinstance(variables, str) or len(variables) != 2:
            raise ValueError(f"variables must be two names, one per coupling; got {variables!r}")
        out = tuple(_check_variable(v) for v in variables)
    if out[0] == out[1]:
        raise ValueError(f"variables must be distinct; got {out!r}")
    return out


def _recognise(c: np.ndarray, k: int) -> tuple[tuple, np.ndarray]:
    """Fractions of the coefficients (``Fraction(0)`` for rounding noise) and the zero mask."""
    deg = np.add.outer(np.arange(k + 1), np.arange(k + 1))
    zero = np.zeros(c.shape, dtype=bool)
    for d in range(k + 1):
        at = deg == d
        scale = float(np.max(np.abs(c[at]))) if np.any(at) else 0.0
        zero |= at & (np.abs(c) <= _NOISE_RTOL * scale)
    zero |= deg > k
    rows = []
    for a in range(k + 1):
        rows.append(tuple(Fraction(0) if zero[a, b] else simple_rational(float(c[a, b])) for b in range(k + 1)))
    return tuple(rows), zero


def _monomial(a: int, b: int, texs: Sequence[str], names: Sequence[str]) -> tuple[str, str]:
    t, p = [], []
    for e, tx, nm in ((a, texs[0], names[0]), (b, texs[1], names[1])):
        if e == 1:
            t.append(tx)
            p.append(nm)
        elif e > 1:
            t.append(f"{tx}^{{{e}}}")
            p.append(f"{nm}**{e}")
    return "\\,".join(t), "*".join(p)


def _polynomial(c: np.ndarray, rationals: tuple, zero: np.ndarray, k: int, texs: Sequence[str], names: Sequence[str]) -> tuple[str, str]:
    """(LaTeX, Python) of Σ E^(a,b) λ₁^a λ₂^b by total degree, descending powers of the first coupling."""
    terms: list[tuple[bool, str, str]] = []
    for d in range(k + 1):
        for a in range(d, -1, -1):
            b = d - a
            if zero[a, b]:
                continue
            x = float(c[a, b])
            f = rationals[a][b]
            m_tex = _tex_fraction(abs(f), LATEX_DIGITS) if f is not None else _tex_float(abs(x), LATEX_DIGITS)
            m_py = _py_fraction(abs(f)) if f is not None else repr(abs(x))
            terms.append((x < 0, *_term(m_tex, m_py, *_monomial(a, b, texs, names), constant=d == 0)))
    return _join_terms(terms)


def _axis_reach(r: ValidityRegion, angle: float) -> tuple[str, float] | None:
    """(status, reach) of the ray at ``angle``: reach t*·|d| or the search limit; None if not searched."""
    hit = np.flatnonzero(np.abs(np.asarray(r.angles) - angle) < 1e-12)
    if not hit.size:
        return None
    i = int(hit[0])
    b = r.boundaries[i]
    norm = float(np.hypot(*r.directions[i]))
    if b.status == "not_reached":
        return b.status, b.max_coupling * norm
    return b.status, float(r.boundary[i]) * norm


def _axis_words(name: str, down: tuple[str, float], up: tuple[str, float]) -> str:
    if "fails_at_zero" in (down[0], up[0]) or any(st in ("ill_defined", "exact_in_sector") for st, _ in (down, up)):
        sides = {"fails_at_zero": "fails at once", "ill_defined": "undefined", "exact_in_sector": "exact in its sector"}
        lo = sides.get(down[0], f"to −{down[1]:.3g}")
        hi = sides.get(up[0], f"to {up[1]:.3g}")
        return f"along the {name} axis: {lo} (negative side), {hi} (positive side)"
    lim = lambda st, x: f"{x:.3g}" + (" (search limit)" if st == "not_reached" else "")  # noqa: E731
    return f"−{lim(*down)} < {name} < {lim(*up)} on its axis"


def _range_sentence(r: ValidityRegion, names: Sequence[str], tex: bool = False) -> str:
    """Where the formula holds, in words: tolerance, nearest boundary, the two axes."""
    words = f"{100 * r.rtol:.3g} %" if r.rtol is not None else f"within {r.tol:.3g}"
    if tex:
        words = f"${100 * r.rtol:.3g}\\,\\%$" if r.rtol is not None else f"within ${_tex_float(r.tol, 3)}$"
    t = np.asarray(r.boundary)
    parts = []
    ok = np.isfinite(t) & (t > 0)
    if np.any(ok):
        pts = np.asarray(r.points)[ok]
        near = pts[int(np.argmin(np.hypot(*pts.T)))]
        parts.append(f"nearest boundary point {_pair(near)}")
    elif not np.any(t == 0):
        parts.append("no boundary found within the search limit")
    zero = np.flatnonzero(t == 0)
    if zero.size:
        d = r.directions[zero[0]]
        parts.append(f"fails at any nonzero coupling on {zero.size} of {t.size} rays (e.g. towards {_pair(d)})")
    for ax, (lo, hi) in enumerate(((math.pi, 0.0), (1.5 * math.pi, 0.5 * math.pi))):
        up, down = _axis_reach(r, hi), _axis_reach(r, lo)
        if up is None or down is None:
            continue
        parts.append(_axis_words(f"${names[ax]}$" if tex else names[ax], down, up))
    return f"valid to {words} inside the region searched ({r.angles.size} rays): " + "; ".join(parts)


def _pair(p: np.ndarray) -> str:
    """A point as text, components below 1e-12 of its length (rounding of cos π/2) shown as 0."""
    big = float(np.max(np.abs(p))) if p.size else 0.0
    q = [0.0 if abs(x) <= 1e-12 * big else float(x) for x in p]
    return "(" + ", ".join(f"{x:.3g}" for x in q) + ")"


def _function_name(target: str, is_quantity: bool) -> str:
    base = "".join(ch if ch.isascii() and (ch.isalnum() or ch == "_") else "_" for ch in target).strip("_") or "level"
    name = base if is_quantity else f"energy_{base}"
    if not name.isidentifier() or name[0].isdigit():
        name = "f_" + name
    return name.lower()


def _python_source(fname: str, names: Sequence[str], expr: str, *, model: Model, target: str, order: int,
                   ranges: Sequence[str], params: Mapping | None, version: str) -> str:
    doc = [f"{target} of model {model.name!r} to total order {order} in ({', '.join(model.coupling_names)}),",
           f"as a function of ({', '.join(names)}) (multivariate Rayleigh–Schrödinger series; ptcheck {version}).", ""]
    if params:
        doc.append("Model parameters: " + ", ".join(f"{k}={v!r}" for k, v in params.items()) + ".")
        doc.append("")
    doc += [f"- {r}." for r in ranges]
    doc += ["", "Exact values were those of the matrices given; check the basis truncation yourself."]
    body = textwrap.indent("\n".join(textwrap.fill(x, 88) if x else "" for x in doc), "    ")
    return f'def {fname}({", ".join(names)}):\n    """{body.strip()}\n    """\n    return {expr}\n'
