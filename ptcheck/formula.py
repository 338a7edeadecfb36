"""Take the formula away: a perturbative expression with its checked validity range.

:func:`formula` turns the expansion :mod:`ptcheck.treatment` gives a level (or a
derived quantity) into text people paste elsewhere: the Rayleigh–Schrödinger
series of a non-degenerate level; for a level of an exactly degenerate group,
the series of its branch (when that series is exactly the branch's eigenvalue)
or the group's Schrieffer–Wolff effective Hamiltonian; the effective
Hamiltonian of a near-degenerate block when that treatment is asked for:

- ``latex``: the equation and where it holds ("valid to 1 % for |λ| < 0.0346"),
  readable both by LaTeX and by matplotlib's mathtext;
- ``expression``: the same polynomial as Python/sympy text;
- ``python``: a small self-contained Python function with a docstring that
  states the model, the tolerance and the range;
- ``to_dict()``: all of it as JSON, with the model name, its parameters and the
  ptcheck version.

The ranges are the boundaries :func:`ptcheck.compare.validity_boundary` finds
for exactly the expansion exported (same treatment, same block), printed to
three significant digits rounded toward λ = 0, so the printed range never
reaches beyond the computed one.

Coefficients that are simple fractions to machine precision are shown as such
(``-21/8``); see :func:`simple_rational` for the test every claimed fraction
passes.
"""

from __future__ import annotations

import html
import keyword
import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from decimal import ROUND_DOWN, Decimal
from fractions import Fraction
from types import MappingProxyType
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _validation as val
from .approximants import Pade, parse_order
from .compare import TRUNCATION_NOTE, compare, validity_boundary
from ._good_states import natural_scales
from .degeneracy import DEFAULT_MIXING_THRESHOLD
from .model import Model
from .quantities import CANCELLATION_RTOL, Quantity
from .series import rs_series
from .treatment import DEFAULT_TREATMENT, DEGENERATE, EXACT_IN_SECTOR, NEAR_DEGENERATE, NONDEGENERATE, TREATMENTS, expansions

__all__ = [
    "DEFAULT_RTOLS",
    "FRACTION_RTOL",
    "MAX_DENOMINATOR",
    "MAX_FRACTION_SIZE",
    "Formula",
    "ValidityRange",
    "formula",
    "simple_rational",
]

#: Relative tolerances used when neither ``tol`` nor ``rtol`` is given (1 % and 5 %).
DEFAULT_RTOLS = (0.01, 0.05)

#: A fraction p/q is claimed for a coefficient c only if ``|c - p/q| <= FRACTION_RTOL |c|`` ...
FRACTION_RTOL = 1e-12
#: ... and ``q <= MAX_DENOMINATOR`` and ``|p| q <= MAX_FRACTION_SIZE``.  For a coefficient that is not a fraction,
#: the chance that some p/q this small lies that close is about
#: ``FRACTION_RTOL x MAX_FRACTION_SIZE`` = 1e-4 (the fractions with q <= Q near c
#: are ~1/(c Q²) apart).
MAX_FRACTION_SIZE = 10**8
#: Largest denominator of a claimed fraction.
MAX_DENOMINATOR = 10**6

#: Significant digits of coefficients that are not fractions, in ``latex``.
LATEX_DIGITS = 6

#: Relative size (to the sum of the magnitudes of the terms that make a coefficient)
#: below which a coefficient is rounding noise, i.e. zero.
_NOISE_RTOL = 1e-12

#: Coupling names that sympy reads as something other than a symbol (or that Python reserves).
_RESERVED = frozenset({"E", "I", "N", "O", "Q", "S", "beta", "gamma", "zeta", "pi", "oo", "nan", "zoo", "Lambda"})

_GREEK = (
    "alpha beta gamma delta epsilon varepsilon zeta eta theta vartheta iota kappa lambda mu nu xi pi rho "
    "sigma tau upsilon phi varphi chi psi omega Gamma Delta Theta Lambda Xi Pi Sigma Upsilon Phi Psi Omega"
).split()
_LATEX_ALIASES = {"lam": r"\lambda", "lamda": r"\lambda", "eps": r"\epsilon"}
_UNICODE_TEX = {
    "⟩": r"\rangle", "⟨": r"\langle", "→": r"\to", "−": "-", "χ": r"\chi", "ω": r"\omega", "δ": r"\delta",
    "Δ": r"\Delta", "α": r"\alpha", "ζ": r"\zeta", "λ": r"\lambda", "ε": r"\epsilon", "θ": r"\theta",
    "φ": r"\phi", "ψ": r"\psi", "σ": r"\sigma", "Ω": r"\Omega", "↑": r"\uparrow", "↓": r"\downarrow",
}
# (mathtext has no \& and no \$: '&' is spelled out, '$' dropped)
_TEX_SPECIAL = {"\\": r"\backslash ", "{": r"\{", "}": r"\}", "_": r"\_", "#": r"\#", "%": r"\%", "&": r"\,\mathrm{and}\,",
                "$": "", "^": r"\^{}", "~": r"\sim "}


def _ro(a: Any) -> np.ndarray:
    a = np.array(a)
    a.setflags(write=False)
    return a


# ====================================================================== fractions
def simple_rational(x: float) -> Fraction | None:
    """The simplest fraction equal to ``x`` to machine precision, or ``None``.

    The candidates are the convergents of the continued fraction of ``x`` (the
    best rational approximations, in order of growing denominator).  The first
    convergent ``p/q`` with ``|x - p/q| <= FRACTION_RTOL |x|`` is returned,
    provided ``q <= MAX_DENOMINATOR`` and ``|p| q <= MAX_FRACTION_SIZE``;
    otherwise ``None``.  Any fraction that close with ``|p| q <=
    MAX_FRACTION_SIZE`` is a convergent (Legendre's theorem: ``|x - p/q| <
    1/(2 q²)``), so none is missed.

    Parameters
    ----------
    x : float

    Returns
    -------
    Fraction or None

    Examples
    --------
    >>> simple_rational(-2.624999999999999)
    Fraction(-21, 8)
    >>> simple_rational(3.141592653589793) is None
    True
    """
    x = float(x)
    if not math.isfinite(x):
        return None
    if x == 0.0:
        return Fraction(0)
    exact = Fraction(x)
    tol = Fraction(FRACTION_RTOL) * abs(exact)
    # continued fraction of |x|; convergents h/k
    rest = abs(exact)
    h_prev, h = 1, int(rest)
    k_prev, k = 0, 1
    rest = rest - int(rest)
    while True:
        if h * k > MAX_FRACTION_SIZE or k > MAX_DENOMINATOR:
            return None
        if abs(abs(exact) - Fraction(h, k)) <= tol:
            return Fraction(h if x > 0 else -h, k)
        if rest == 0:  # pragma: no cover - an exact binary fraction is reached only after the size limit
            return None
        rest = 1 / rest
        a = int(rest)
        rest = rest - a
        h_prev, h = h, a * h + h_prev
        k_prev, k = k, a * k + k_prev


# ====================================================================== text pieces
def _usable_name(name: Any) -> bool:
    """An ASCII Python identifier that is not a keyword."""
    return isinstance(name, str) and name.isascii() and name.isidentifier() and not keyword.iskeyword(name)


def _check_variable(name: Any) -> str:
    if not isinstance(name, str) or not name.isascii() or not name.isidentifier():
        raise ValueError(f"variable must be an ASCII Python identifier (e.g. 'lam', 'g', 'eps'); got {name!r}")
    if keyword.iskeyword(name) or name in _RESERVED:
        raise ValueError(
            f"variable {name!r} is reserved by Python or means something else to sympy "
            f"(refused: {', '.join(sorted(_RESERVED))} and Python keywords); use e.g. 'lam' or 'g'"
        )
    return name


def _tex_text(s: str) -> str:
    """Free text (a label or a name) for use inside math mode."""
    out = []
    for ch in str(s):
        if ch in _UNICODE_TEX:
            out.append(_UNICODE_TEX[ch] + (" " if _UNICODE_TEX[ch][-1].isalpha() else ""))
        elif ch in _TEX_SPECIAL:
            out.append(_TEX_SPECIAL[ch])
        else:
            out.append(ch)
    return "".join(out).strip()


def _tex_symbol(name: str) -> str:
    """LaTeX of a name: Greek letter names become letters, one letter stays, else upright text."""
    if name in _LATEX_ALIASES:
        return _LATEX_ALIASES[name]
    if name in _GREEK:
        return "\\" + name
    base, _, sub = name.partition("_")
    if sub and base:
        return f"{_tex_symbol(base)}_{{{_tex_text(sub)}}}"
    if len(name) == 1:
        return name
    if any(c in _UNICODE_TEX for c in name):
        return _tex_text(name)
    return r"\mathrm{" + _tex_text(name) + "}"


def _tex_float(x: float, digits: int) -> str:
    s = f"{x:.{digits}g}"
    if "e" in s:
        m, e = s.split("e")
        e = str(int(e))
        return f"10^{{{e}}}" if m == "1" else f"{m}\\times10^{{{e}}}"
    return s


def _tex_fraction(f: Fraction, digits: int) -> str:
    """A fraction in LaTeX; one over a power of ten is written as the decimal it is (0.01, not 1/100)."""
    q = f.denominator
    if q == 1:
        return str(f.numerator)
    if 10 ** (len(str(q)) - 1) == q:
        return _tex_float(float(f), digits)
    return f"\\frac{{{f.numerator}}}{{{q}}}"


def _py_fraction(f: Fraction) -> str:
    return str(f.numerator) if f.denominator == 1 else f"{f.numerator}/{f.denominator}"


@dataclass(frozen=True)
class _Coef:
    value: complex
    fraction: Fraction | None  # Fraction(0) marks a coefficient that is zero to rounding


def _is_real(c: _Coef) -> bool:
    return c.fraction is not None or c.value.imag == 0.0


def _term(m_tex: str, m_py: str, p_tex: str, p_py: str, *, constant: bool) -> tuple[str, str]:
    """(LaTeX, Python) of one term: magnitude times power (a unit magnitude left out beside a power)."""
    if not constant and m_py == "1":
        m_tex, m_py = "", ""
    sep_tex = "\\," if ("\\times" in m_tex or m_tex.startswith("10^")) and p_tex else ""
    return m_tex + sep_tex + p_tex, m_py + ("*" if m_py and p_py else "") + p_py


def _join_terms(terms: Sequence[tuple[bool, str, str]]) -> tuple[str, str]:
    """(LaTeX, Python) sum of (negative, term LaTeX, term Python); "0" for no terms."""
    if not terms:
        return "0", "0"
    signs = [("-" if neg else "") if i == 0 else (" - " if neg else " + ") for i, (neg, _, _) in enumerate(terms)]
    return "".join(g + t for g, (_, t, _) in zip(signs, terms)), "".join(g + q for g, (_, _, q) in zip(signs, terms))


def _poly(coefs: Sequence[_Coef], var_tex: str, var_py: str, digits: int) -> tuple[str, str]:
    """(LaTeX, Python) text of Σ_k c_k x^k, zero terms left out."""
    terms: list[tuple[bool, str, str]] = []
    for k, c in enumerate(coefs):
        if c.fraction == 0:
            continue
        p_tex = "" if k == 0 else var_tex if k == 1 else f"{var_tex}^{{{k}}}"
        p_py = "" if k == 0 else var_py if k == 1 else f"{var_py}**{k}"
        if _is_real(c):
            x = float(c.value.real) if c.fraction is None else float(c.fraction)
            neg = x < 0
            if c.fraction is not None:
                m_tex, m_py = _tex_fraction(abs(c.fraction), digits), _py_fraction(abs(c.fraction))
            else:
                m_tex, m_py = _tex_float(abs(x), digits), repr(abs(x))
        else:
            neg = False
            re, im = float(c.value.real), float(c.value.imag)
            sign = "-" if im < 0 else "+"
            m_tex = f"({_tex_float(re, digits)} {sign} {_tex_float(abs(im), digits)}\\,i)"
            m_py = f"({re!r}{sign}{abs(im)!r}j)"
        terms.append((neg, *_term(m_tex, m_py, p_tex, p_py, constant=k == 0)))
    return _join_terms(terms)


def _sig3_down(x: float) -> str:
    """|x| to 3 significant digits, rounded toward zero (never beyond the computed value)."""
    d = Decimal(repr(abs(float(x))))
    if d == 0:
        return "0"
    q = Decimal(1).scaleb(d.adjusted() - 2)
    return f"{float(d.quantize(q, rounding=ROUND_DOWN)):.3g}"


# ====================================================================== results
@dataclass(frozen=True, repr=False)
class ValidityRange:
    """Where the exported formula meets one tolerance.

    Attributes
    ----------
    tol, rtol : float or None
        The tolerance (absolute, energy units; or relative).  Exactly one is set.
    lower, upper : float
        Signed boundaries λ* on the negative and positive side (the
        ``coupling`` of the :class:`~ptcheck.compare.ValidityBoundary` of
        that direction): ``-inf``/``inf`` when the error stays within the
        tolerance up to the search limit, ``0.0`` when it fails at any λ ≠ 0
        or when that side was not searched, NaN when ill defined.
    boundaries : tuple of ValidityBoundary
        The boundaries found, one per direction searched (negative first).
    text : str
        The range in words, e.g. ``"valid to 1 % for |λ| < 0.0346"``.
    latex : str
        The same, LaTeX/mathtext.
    """

    tol: float | None
    rtol: float | None
    lower: float
    upper: float
    boundaries: tuple
    text: str
    latex: str

    def __repr__(self) -> str:
        return f"ValidityRange({self.text!r})"

    def to_dict(self) -> dict:
        def f(x: float) -> float | str:
            return x if math.isfinite(x) else str(x)

        return {
            "tol": self.tol,
            "rtol": self.rtol,
            "lower": f(self.lower),
            "upper": f(self.upper),
            "text": self.text,
            "latex": self.latex,
            "boundaries": [b.to_dict() for b in self.boundaries],
        }


@dataclass(frozen=True, repr=False, eq=False)
class Formula:
    """A perturbative formula with its checked validity ranges, as text for papers, slides and code.

    Attributes
    ----------
    model_name : str
    params : mapping or None
        Parameters of the model (builder keyword arguments), when known.
    target : str
        Level label or quantity name.
    kind : str
        ``"series"`` (a polynomial in the coupling: a level's energy or a
        quantity) or ``"effective_hamiltonian"`` (a ``p x p`` matrix polynomial
        whose eigenvalue on the branch of :attr:`target` is the level's energy).
    order : int
        Truncation order: terms up to λ^order.
    treatment : str
        Treatment used (decided by :mod:`ptcheck.treatment`):
        ``"nondegenerate"`` (Rayleigh–Schrödinger series), ``"degenerate"``
        (degenerate perturbation theory of an exactly degenerate group: the
        branch's series, or the group's Schrieffer–Wolff effective
        Hamiltonian), ``"near-degenerate block"`` (Schrieffer–Wolff effective
        Hamiltonian of the block, on request); ``"mixed"`` for a quantity whose
        levels are treated differently.
    reason : str
        Why, in plain words (per level for a quantity).
    exact_in_sector : bool
        The exported group/block is a whole invariant sector: its expansion is
        exact diagonalisation, not perturbation theory (no tolerance judged).
    levels, labels : tuple
        Work-basis indices and names of the levels involved: the group's or
        block's levels for an effective Hamiltonian (its basis, in this
        order), the level or the quantity's levels for a series.
    variable : str
        Name of the coupling in :attr:`expression` and :attr:`python`.
    coefficients : (order + 1,) or (order + 1, p, p) ndarray, read-only
        The computed coefficients (energy units): ``E^(k)``, ``Q^(k)`` or
        ``H_eff^(k)``.
    rationals : tuple
        Same nesting as :attr:`coefficients`: the coefficient as an exact
        :class:`~fractions.Fraction` where it is one to machine precision
        (:func:`simple_rational`; ``Fraction(0)`` for a coefficient that is
        zero to rounding), else ``None``.
    ranges : tuple of ValidityRange
        One per tolerance asked for (relative tolerances first).
    equations : tuple of str
        The equation(s) alone, each one line of LaTeX/mathtext in ``$...$``
        (one per independent matrix entry for an effective Hamiltonian).
    latex : str
        The equation(s) with the validity ranges (LaTeX text that mathtext
        also reads; one equation per line).
    expression : str
        The formula as text that Python and ``sympy.sympify`` evaluate, with
        the coupling named :attr:`variable` (a nested list for a matrix).
    python : str
        Source of a pure-Python function ``<function_name>(<variable>)``.
    function_name : str
    couplings : (C,) ndarray, read-only
        Couplings λ of the error curve (dimensionless).
    abs_error, rel_error : (C,) ndarray, read-only
        Error of the formula against the exact level/quantity on
        :attr:`couplings` (from :func:`ptcheck.compare.compare`; the relative
        error is NaN where its reference is ~0).
    coupling_scale : float or None
        Physical coupling of λ = 1 (from the model), in :attr:`coupling_unit`.
    coupling_unit : str or None
    version : str
        ptcheck version that made the formula.
    exact_solves : int
        Exact diagonalisations used (boundaries and curve).
    notes : tuple of str
    """

    model_name: str
    params: Mapping | None
    target: str
    kind: str
    order: int
    treatment: str
    levels: tuple
    labels: tuple
    variable: str
    coefficients: np.ndarray
    rationals: tuple
    ranges: tuple
    equations: tuple
    latex: str
    expression: str
    python: str
    function_name: str
    couplings: np.ndarray
    abs_error: np.ndarray
    rel_error: np.ndarray
    coupling_scale: float | None
    coupling_unit: str | None
    version: str
    exact_solves: int
    reason: str = ""
    exact_in_sector: bool = False
    notes: tuple = ()

    def __repr__(self) -> str:
        expr = self.expression if len(self.expression) <= 70 else self.expression[:67] + "..."
        ranges = "; ".join(r.text for r in self.ranges)
        return f"Formula({self.target}, order {self.order}, {self.treatment}: {expr}; {ranges})"

    def to_dict(self) -> dict:
        c = self.coefficients
        coefficients = {"real": np.real(c).tolist(), "imag": np.imag(c).tolist()} if np.iscomplexobj(c) else c.tolist()
        return {
            "model": self.model_name,
            "params": None if self.params is None else _json_safe(dict(self.params)),
            "ptcheck_version": self.version,
            "target": self.target,
            "kind": self.kind,
            "order": self.order,
            "treatment": self.treatment,
            "reason": self.reason,
            "exact_in_sector": self.exact_in_sector,
            "levels": list(self.levels),
            "labels": list(self.labels),
            "variable": self.variable,
            "coefficients": coefficients,
            "rationals": _fractions_json(self.rationals),
            "ranges": [r.to_dict() for r in self.ranges],
            "equations": list(self.equations),
            "latex": self.latex,
            "expression": self.expression,
            "python": self.python,
            "function_name": self.function_name,
            "coupling_scale": self.coupling_scale,
            "coupling_unit": self.coupling_unit,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        eqs = "<br>".join(html.escape(e) for e in self.equations)
        ranges = "".join(f"<li>{html.escape(r.text)}</li>" for r in self.ranges)
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Formula</b> for {html.escape(self.target)} (model {html.escape(self.model_name)}), order {self.order}, "
            f"{html.escape(self.treatment)}<p>{eqs}</p><ul>{ranges}</ul>"
            f"<pre>{html.escape(self.python)}</pre>" + (f"<ul>{notes}</ul>" if notes else "")
        )


def _fractions_json(x: Any) -> Any:
    if isinstance(x, tuple):
        return [_fractions_json(t) for t in x]
    return None if x is None else _py_fraction(x)


def _json_safe(x: Any) -> Any:
    if isinstance(x, Mapping):
        return {str(k): _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_safe(v) for v in x]
    if isinstance(x, (bool, str)) or x is None:
        return x
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(float(x)) else str(float(x))
    return str(x)


# ====================================================================== entry point
def _tolerances(x: Any, name: str) -> tuple[float, ...]:
    if x is None:
        return ()
    items = list(x) if isinstance(x, (list, tuple, np.ndarray)) else [x]
    if not items:
        raise ValueError(f"{name} is empty; give a tolerance or a list of them; got {x!r}")
    out = tuple(float(val.check_positive(t, name)) for t in items)
    return tuple(dict.fromkeys(out))


def _directions(x: Any) -> tuple[int, ...]:
    items = list(x) if isinstance(x, (list, tuple)) else [x]
    if not items or any(isinstance(d, bool) or d not in (1, -1) for d in items):
        raise ValueError(f"directions must hold +1 and/or -1; got {x!r}")
    return tuple(sorted({int(d) for d in items}))


def _physical(model: Model) -> tuple[float | None, str | None]:
    scale = getattr(model, "coupling_scale", None)
    unit = getattr(model, "coupling_unit", None)
    try:
        scale = None if scale is None else float(scale)
    except (TypeError, ValueError):
        scale = None
    if scale is not None and (not math.isfinite(scale) or scale == 0.0):
        scale = None
    return scale, (None if unit is None else str(unit))


def formula(
    model: Model,
    target: Any,
    order: int,
    *,
    tol: float | Sequence[float] | None = None,
    rtol: float | Sequence[float] | None = None,
    directions: Sequence[int] = (-1, 1),
    treatment: str = DEFAULT_TREATMENT,
    coupling: float | None = None,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    backend: str = "auto",
    max_coupling: float | None = None,
    xrtol: float = 1e-3,
    variable: str | None = None,
    couplings: Any = None,
    params: Mapping[str, Any] | None = None,
) -> Formula:
    """The perturbative formula of a level or quantity, with where it holds, as text.

    Parameters
    ----------
    model : Model
    target : level key or Quantity
        Energy rank (int), label (e.g. ``(1, 0)``) or :class:`~ptcheck.Quantity`.
    order : int
        Truncation order (terms up to λ^order).  Padé approximants are not exported.
    tol : float or sequence of float, optional
        Absolute tolerance(s) on the energy (energy units).
    rtol : float or sequence of float, optional
        Relative tolerance(s), as in :func:`~ptcheck.compare.validity_boundary`
        (relative to the exact shift of a level, or to the reference a
        quantity names).  Default, when neither is given:
        :data:`DEFAULT_RTOLS` (1 % and 5 %).
    directions : sequence of {+1, -1}, default (-1, +1)
        Signs of the coupling searched.  Give ``(1,)`` when only λ > 0 makes
        sense (e.g. an x⁴ anharmonicity).
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        As everywhere in ptcheck (:mod:`ptcheck.treatment` decides, the
        formula exports what it decided): ``"standard"`` is the
        Rayleigh–Schrödinger series of a level that is not degenerate in its
        sector, and degenerate perturbation theory for a level of an exactly
        degenerate group -- the scalar series of its branch when the group's
        effective Hamiltonian is diagonal in its good states at every order
        exported (then that series *is* the branch's eigenvalue), else the
        group's effective Hamiltonian.  ``"block"``/``"auto"`` export the
        near-degenerate block of the level at ``coupling`` (its effective
        Hamiltonian).
    coupling : float, optional
        Coupling of interest |λ|: where ``"block"``/``"auto"`` judge
        near-degeneracy (required for them), and where the boundary search
        makes sure the first crossing below it is found.
    threshold : float
        Mixing-ratio threshold (see :mod:`ptcheck.degeneracy`).
    backend : str
        Exact solver backend.
    max_coupling : float, optional
        Largest |λ| searched for the boundaries (see ``validity_boundary``).
        Give it when ‖V‖ of a truncated basis is much larger than the
        couplings that matter (e.g. oscillators).
    xrtol : float, default 1e-3
        Relative precision of the boundaries.
    variable : str, optional
        Name of the coupling in ``expression`` and ``python`` (an ASCII
        identifier).  Default: ``"lam"`` (λ in LaTeX).
    couplings : (C,) array_like, optional
        Couplings of the error curve.  Default: 201 points reaching 1.5 x the
        widest range found, on the sides searched.
    params : mapping, optional
        Model parameters written into ``to_dict()`` and the docstring
        (default: the model's ``params`` attribute, if any).

    Returns
    -------
    Formula

    Raises
    ------
    ValueError, TypeError
        Bad input; a Padé order; ``treatment="block"``/``"auto"`` without
        ``coupling``; a quantity with a level whose energy is an eigenvalue of
        an effective Hamiltonian (no single polynomial: export that level's
        effective Hamiltonian instead).

    Notes
    -----
    The ranges come from :func:`~ptcheck.compare.validity_boundary` called
    with the same ``treatment``, ``coupling`` and ``threshold`` -- the
    expansion exported, not a better one.  Where a near-degenerate partner
    limits it, the boundary's suggestion (the block alternative) is in
    ``notes``.  The error curve is :func:`compare` of the same expansion.

    Examples
    --------
    >>> from ptcheck.models import anharmonic_oscillator
    >>> m = anharmonic_oscillator(kind="quartic", n_basis=40)
    >>> f = formula(m, 0, 3, rtol=0.01, directions=(1,), max_coupling=1.0)
    >>> f.expression
    '1/2 + 3/4*lam - 21/8*lam**2 + 333/16*lam**3'
    >>> f.ranges[0].text
    'valid to 1 % for 0 ≤ λ < 0.0346'
    """
    from . import __version__  # the package is fully imported by the time this runs

    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck.Model; got {type(model).__name__}")
    if model.n_couplings > 1:
        raise ValueError(
            f"model {model.name!r} has {model.n_couplings} couplings ({', '.join(model.coupling_names)}): export its "
            "multivariate formula with ptcheck.multi_formula(model, target, order), or a one-coupling formula along a "
            "direction with formula(model.along(d), ...)"
        )
    if isinstance(target, list):
        raise TypeError(f"formula takes one level or quantity; got a list {target!r}")
    spec = parse_order(order)
    if isinstance(spec, Pade):
        raise ValueError(f"formula exports truncated series; give an int order (got {spec}, a Padé approximant)")
    rtols = _tolerances(rtol, "rtol")
    tols = _tolerances(tol, "tol")
    if not rtols and not tols:
        rtols = DEFAULT_RTOLS
    dirs = _directions(directions)
    treatment = val.check_choice(treatment, "treatment", TREATMENTS)
    if coupling is not None:
        coupling = abs(val.as_coupling(coupling))
    elif treatment in ("block", "auto"):
        raise ValueError(
            f"treatment={treatment!r} judges near-degenerate blocks at a coupling of interest: give coupling= "
            "(e.g. the coupling of a suggestion); got coupling=None"
        )
    threshold = float(val.check_positive(threshold, "threshold"))
    if variable is None:
        variable = "lam"  # the formula is in λ (a model's coupling_name names λ x coupling_scale, not λ)
    variable = _check_variable(variable)
    grid = None if couplings is None else val.as_couplings(couplings)
    if params is None:
        params = getattr(model, "params", None)
    if params is not None and not isinstance(params, Mapping):
        raise TypeError(f"params must be a mapping of parameter names to values; got {params!r}")

    is_quantity = isinstance(target, Quantity)
    levels = list(target.resolve(model)) if is_quantity else [model.level_index(target)]
    exps = expansions(model, levels, spec, treatment=treatment, coupling=coupling, threshold=threshold)
    var_tex = _tex_symbol(variable)
    notes: list[str] = [TRUNCATION_NOTE]

    # ---------------------------------------------------------------- coefficients
    part = _exported_part(model, target, levels, exps, spec)
    notes.extend(part.notes)
    rationals, coefs = _recognise(part.coefficients, part.zero)

    # ---------------------------------------------------------------- ranges
    scale, unit = _physical(model)
    search = {"treatment": treatment, "backend": backend, "max_coupling": max_coupling, "xrtol": xrtol,
              "threshold": threshold, "coupling": coupling}
    ranges = [
        _find_range(model, target, spec, dirs, search, var_tex, scale, unit, **tkw)
        for tkw in [{"rtol": t} for t in rtols] + [{"tol": t} for t in tols]
    ]
    solves = sum(b.exact_solves for r in ranges for b in r.boundaries)
    notes.extend(n for r in ranges for b in r.boundaries for n in b.notes if n != TRUNCATION_NOTE)

    # ---------------------------------------------------------------- text
    equations, expression = _equations(part, coefs, var_tex, variable)
    latex = _latex(part, equations, ranges, spec)
    python = _python_source(part, variable, expression, model=model, params=params, order=spec, ranges=ranges,
                            quantity=target if is_quantity else None, scale=scale, unit=unit, version=__version__)

    # ---------------------------------------------------------------- error curve
    if grid is None:
        grid = _curve_grid(ranges, dirs)
    # (coupling 0 unless given: the same expansions, and no near-degeneracy judged at the curve's far end)
    cmp = compare(model, [target], [spec], grid, treatment=treatment, backend=backend, threshold=threshold,
                  coupling=coupling if coupling is not None else 0.0)
    solves += cmp.exact_solves
    notes.extend(n for n in cmp.notes if n != TRUNCATION_NOTE and not n.startswith(("Level ", "Relative errors are undefined")))

    return Formula(
        model_name=model.name,
        params=None if params is None else MappingProxyType(dict(params)),
        target=part.name,
        kind=part.kind,
        order=int(spec),
        treatment=part.treatment,
        levels=part.levels,
        labels=part.labels,
        variable=variable,
        coefficients=_ro(part.coefficients),
        rationals=rationals,
        ranges=tuple(ranges),
        equations=equations,
        latex=latex,
        expression=expression,
        python=python,
        function_name=part.function_name,
        couplings=_ro(cmp.couplings),
        abs_error=_ro(cmp.abs_error[0, 0]),
        rel_error=_ro(cmp.rel_error[0, 0]),
        coupling_scale=scale,
        coupling_unit=unit,
        version=__version__,
        exact_solves=int(solves),
        reason=part.reason,
        exact_in_sector=part.exact_in_sector,
        notes=tuple(dict.fromkeys(notes)),
    )


# ====================================================================== helpers
@dataclass(frozen=True)
class _Part:
    """What is exported: a scalar series or an effective Hamiltonian, with its names and treatment."""

    kind: str  # "series" | "effective_hamiltonian"
    name: str  # target name (level label or quantity name)
    lhs: str  # LaTeX of the left-hand side
    levels: tuple
    labels: tuple
    function_name: str
    coefficients: np.ndarray  # (order + 1,) or (order + 1, p, p)
    zero: np.ndarray  # series: bool per coefficient; matrix: noise floor per order
    notes: tuple
    treatment: str  # treatment used (one of ptcheck.treatment.USED; "mixed" for a quantity of several)
    reason: str
    exact_in_sector: bool
    what: str  # the expansion in words (docstring of the Python function)


#: Off-diagonal part of a degenerate group's H_eff^(k) in its good states, relative to the natural size of
#: order k, below which the group is diagonal there (its branch eigenvalues are then its scalar series).
_DIAGONAL_RTOL = 1e-10


def _h0_scale(model: Model) -> float:
    return float(max(np.max(np.abs(model.e0)), np.ptp(model.e0)))


def _gap(model: Model, levels: Sequence[int]) -> float:
    inside = np.zeros(model.n, dtype=bool)
    inside[list(levels)] = True
    if inside.all():
        return math.inf
    return float(np.min(np.abs(model.e0[~inside][:, None] - model.e0[inside][None, :])))


def _group_sizes(model: Model, levels: Sequence[int], order: int) -> np.ndarray:
    """(order + 1,) natural size of an order-k coefficient of a group/block (k = 0: the H0 scale)."""
    return np.concatenate([[_h0_scale(model)], natural_scales(model.norm_v, _gap(model, levels), order)])


def _branch_is_series(model: Model, e: Any) -> bool:
    """A degenerate level whose branch eigenvalue is exactly its scalar series.

    True when the treatment gives the branch's Taylor coefficients and the
    group's ``H_eff^(k)`` (k <= order) are diagonal in its good states (to
    rounding): then every eigenvalue branch of the truncated ``H_eff(λ)`` is a
    diagonal entry, i.e. that polynomial -- what the boundaries judge.
    """
    if e.energy_coefficients is None:
        return False
    w = np.asarray(e.good_states)
    q = np.einsum("ji,kjl,lm->kim", w.conj(), np.asarray(e.effective_hamiltonian), w)
    sizes = _group_sizes(model, e.group, e.order)
    off = q - np.einsum("kii->ki", q)[:, :, None] * np.eye(w.shape[0])[None]
    if np.any(np.max(np.abs(off), axis=(1, 2)) > _DIAGONAL_RTOL * sizes):
        return False
    i = e.group.index(e.level)
    diag = np.real(q[1:, i, i])
    return bool(np.all(np.abs(diag - np.asarray(e.energy_coefficients)[1:]) <= _DIAGONAL_RTOL * sizes[1:]))


def _scalar_series(model: Model, e: Any, order: int) -> tuple[np.ndarray, np.ndarray] | None:
    """(coefficients E^(k) (order + 1,), size of the terms that make each one) of a level, or None.

    None when the level's energy is an eigenvalue of an effective Hamiltonian
    that no scalar series equals.  Sizes: for a Rayleigh–Schrödinger series
    ``E^(k) = ⟨n|V|ψ^(k−1)⟩`` is made of terms of total size
    ``Σ_m (|V_nm| + max_m' |V_nm'|) |ψ^(k−1)_m|`` (the second part covers the
    rounding of V's own entries, e.g. after rotating into the eigenbasis of
    H0); for a degenerate branch, the natural size ``‖V‖ (‖V‖/gap)^(k−1)``;
    order 0: the H0 scale.
    """
    n = e.level
    if e.treatment == DEGENERATE:
        if not _branch_is_series(model, e):
            return None
        return np.asarray(e.energy_coefficients, dtype=float), _group_sizes(model, e.group, order)
    if e.treatment == NEAR_DEGENERATE:
        if len(e.group) > 1:
            return None
        c = np.real(np.asarray(e.block.coefficients)[:, 0, 0])  # a block of one level: the RS series
        s = rs_series(model, n, order)
    else:
        c, s = np.asarray(e.energy_coefficients, dtype=float), e.series
    v_row = model.v[[n]].toarray()[0] if sp.issparse(model.v) else np.asarray(model.v[n])
    a = np.full(order + 1, _h0_scale(model))
    a[1:] = np.abs(np.asarray(s.state_coefficients)[:-1]) @ (np.abs(v_row) + np.max(np.abs(v_row)))
    return np.asarray(c, dtype=float), a


def _vector_text(coeffs: np.ndarray, names: Sequence[str]) -> str:
    """A state as text, e.g. '0.7071 |a⟩ − 0.7071 |b⟩' (a global phase makes the largest entry positive)."""
    c = np.asarray(coeffs, dtype=complex)
    big = c[int(np.argmax(np.abs(c)))]
    c = c * (abs(big) / big)
    terms = []
    for x, name in zip(c, names):
        if abs(x) < 1e-10:
            continue
        if abs(x.imag) < 1e-12:
            mag, neg = f"{abs(x.real):.4g}", x.real < 0
        else:
            mag, neg = f"({x.real:.4g}{x.imag:+.4g}i)", False
        ket = name if name.startswith("|") else f"|{name}⟩"
        terms.append((" − " if neg else " + ") + f"{mag} {ket}")
    text = "".join(terms)
    return text[3:] if text.startswith(" + ") else "−" + text[3:]


def _basis_note(model: Model, levels: Sequence[int]) -> str | None:
    """Where the work basis of ``levels`` is not the model's input basis, write its states in that basis."""
    eye = np.zeros((len(levels), model.n))
    eye[np.arange(len(levels)), list(levels)] = 1.0
    u = model.to_user_basis(eye)
    if np.all(np.sum(np.abs(u) > 1e-10, axis=1) == 1):
        return None
    parts = []
    for n, row in zip(levels, u):
        nz = np.flatnonzero(np.abs(row) > 1e-10)
        parts.append(f"{model.label(n)} = {_vector_text(row[nz], [f'e{j}' for j in nz])}")
    return (
        "The basis states are ptcheck's work basis (eigenbasis of H0, rotated inside an exactly degenerate group "
        "to the eigenvectors of V there); in the model's input basis e0, e1, ...: " + "; ".join(parts) + "."
    )


def _exported_part(model: Model, target: Any, levels: list[int], exps: list, order: int) -> _Part:
    if isinstance(target, Quantity):
        return _quantity_part(model, target, levels, exps, order)
    (e,) = exps
    name = model.label(e.level)
    found = _scalar_series(model, e, order)
    if found is not None:
        c, a = found
        zero = np.abs(c) <= _NOISE_RTOL * a
        notes: tuple = ()
        if e.treatment == DEGENERATE:
            others = ", ".join(model.label(m) for m in e.group)
            w = np.asarray(e.good_states)[:, e.group.index(e.level)]
            what = (f"Energy of level {name} (degenerate perturbation theory: branch of the exactly degenerate group "
                    f"({others}) with good state {_vector_text(w, [model.label(m) for m in e.group])}; order {order}).")
            notes = (
                f"Level {name}: {e.reason}. The group's effective Hamiltonian is diagonal in its good states at every "
                f"order exported, so this series is exactly the eigenvalue of its branch (good state "
                f"{_vector_text(w, [model.label(m) for m in e.group])}).",
            )
            note = _basis_note(model, e.group)
            notes += (note,) if note else ()
        elif e.treatment == NEAR_DEGENERATE:
            what = f"Energy of level {name} (a near-degenerate block of one level: the Rayleigh–Schrödinger series, order {order})."
        else:
            what = f"Energy of level {name} (Rayleigh–Schrödinger series, order {order})."
        return _Part("series", name, f"E_{{{_tex_text(name)}}}", (e.level,), (name,), "energy", c, zero, notes,
                     e.treatment, e.reason, e.exact_in_sector, what)
    # an effective Hamiltonian: the degenerate group's, or the near-degenerate block's
    group = tuple(e.group)
    labels = tuple(model.label(m) for m in group)
    if e.treatment == DEGENERATE:
        c = np.asarray(e.effective_hamiltonian)
        which = "degenerate group"
        i = group.index(e.level)
        branch = (
            f"branch {i + 1} of the group counted in ascending energy at small λ > 0 (good state "
            f"{_vector_text(np.asarray(e.good_states)[:, i], labels)})"
        )
        why = ("its effective Hamiltonian is not diagonal in its good states at every order exported, so no scalar "
               "series equals that eigenvalue" if e.energy_coefficients is not None
               else "its good states are not resolved within the orders exported")
        block_notes: tuple = ()
    else:
        c = np.asarray(e.block.coefficients)
        which = NEAR_DEGENERATE
        branch = f"the branch that starts at E = {model.e0[e.level]:.6g} at λ = 0"
        why = "the levels of the block are treated together"
        block_notes = tuple(e.block.notes)
    if np.iscomplexobj(c) and not np.any(np.imag(c)):
        c = np.real(c)
    note = (
        f"Level {name}: {e.reason}. Exported: the effective Hamiltonian of the {which} ({', '.join(labels)}; "
        f"Schrieffer–Wolff); the level's energy is its eigenvalue on {branch}; {why}. The ranges are for this level; "
        "ask for the other levels separately."
    )
    basis = _basis_note(model, group)
    what = (f"Effective Hamiltonian H_eff of the {which} {', '.join(labels)} (Schrieffer–Wolff, order {order}), a "
            f"{len(group)} x {len(group)} matrix (list of rows) in that basis; the energy of level {name} is its "
            f"eigenvalue on {branch}.")
    floor = (_NOISE_RTOL * _group_sizes(model, group, c.shape[0] - 1))[:, None, None]
    return _Part("effective_hamiltonian", name, "H", group, labels, "effective_hamiltonian", c, floor,
                 (note, *((basis,) if basis else ()), *block_notes), e.treatment, e.reason, e.exact_in_sector,
                 what)


def _quantity_part(model: Model, target: Quantity, levels: list[int], exps: list, order: int) -> _Part:
    """Q^(k) = Σ_i w_i E_i^(k); zero to rounding when ``|Q^(k)| <= CANCELLATION_RTOL Σ_i |w_i E_i^(k)| +
    1e-12 Σ_i |w_i| a_ik`` (``a_ik``: size of the terms that make E_i^(k); rounding, and cancellation
    between the levels)."""
    found = [_scalar_series(model, e, order) for e in exps]
    bad = [(model.label(n), e.treatment) for n, e, f in zip(levels, exps, found) if f is None]
    if bad:
        names = ", ".join(f"{lab} ({t})" for lab, t in bad)
        raise ValueError(
            f"quantity {target.name!r}: the energy of level(s) {names} is an eigenvalue of an effective Hamiltonian "
            "that no scalar series equals here, so the quantity has no single polynomial formula; export each "
            f"level's effective Hamiltonian instead (formula(model, level, {order}, ...))"
        )
    weights = np.array([target.resolve(model)[n] for n in levels])
    level_c = np.array([f[0] for f in found])
    floors = np.array([f[1] for f in found])
    w = np.abs(weights)
    c = weights @ level_c
    zero = np.abs(c) <= CANCELLATION_RTOL * (w @ np.abs(level_c)) + _NOISE_RTOL * (w @ floors)
    kinds = list(dict.fromkeys(e.treatment for e in exps))
    used = kinds[0] if len(kinds) == 1 else "mixed"
    how = "; ".join(f"{model.label(n)}: {e.treatment}" for n, e in zip(levels, exps))
    notes = tuple(f"Level {model.label(n)}: {e.reason}." for n, e in zip(levels, exps) if e.treatment != NONDEGENERATE)
    fname = target.name if _usable_name(target.name) else "quantity"
    return _Part("series", target.name, _tex_symbol(target.name), tuple(levels), tuple(model.label(n) for n in levels),
                 fname, c, zero, notes, used, "; ".join(f"{model.label(n)}: {e.reason}" for n, e in zip(levels, exps)),
                 all(e.exact_in_sector for e in exps),
                 f"{target.name} = {target.expression()} (perturbation series of each level, order {order}; {how}).")


def _equations(part: _Part, coefs: list, var_tex: str, variable: str) -> tuple[tuple[str, ...], str]:
    """(LaTeX equations, one line each; Python/sympy expression)."""
    if part.kind == "series":
        poly_tex, poly_py = _poly(coefs, var_tex, variable, LATEX_DIGITS)
        arg = "" if "(" in part.name else f"({var_tex})"  # a name like ω(|1,0⟩→|0,0⟩) carries its own parentheses
        return (f"${part.lhs}{arg} = {poly_tex}$",), poly_py
    p = len(part.levels)
    sep = "," if p >= 10 else ""
    eq, rows = [], []
    for i in range(p):
        row = []
        for j in range(p):
            t_tex, t_py = _poly([c[i][j] for c in coefs], var_tex, variable, LATEX_DIGITS)
            row.append(t_py)
            if j >= i:  # Hermitian: the upper triangle says it all
                eq.append(f"$H_{{{i + 1}{sep}{j + 1}}}({var_tex}) = {t_tex}$")
        rows.append("[" + ", ".join(row) + "]")
    return tuple(eq), "[" + ", ".join(rows) + "]"


def _latex(part: _Part, equations: tuple[str, ...], ranges: list[ValidityRange], order: int) -> str:
    """Equation(s) and ranges: "..., valid to 1 % for |λ| < 0.798, to 5 % for |λ| < 2.11"."""
    range_tex = ", ".join(dict.fromkeys(r.latex if i == 0 else r.latex.removeprefix("valid ") for i, r in enumerate(ranges)))
    if part.kind == "series":
        return equations[0] + (f", {range_tex}" if range_tex else "")
    basis = r",\ ".join(_tex_text(lab) for lab in part.labels)
    which = "degenerate group" if part.treatment == DEGENERATE else NEAR_DEGENERATE
    return "\n".join(equations) + (
        f"\n$H$: effective Hamiltonian of the {which} (Schrieffer-Wolff, order {order}) in the basis $({basis})$; "
        f"level ${_tex_text(part.name)}$ {range_tex}"
    )


def _recognise(c: np.ndarray, zero: np.ndarray) -> tuple[tuple, list]:
    """Fractions (nested like ``c``) and the coefficient records used for the text.

    ``zero``: for a series, a bool array (coefficient is zero to rounding); for a
    matrix, the noise floor of each order (parts of an entry below it are zero).
    """
    def one(x: complex, z: bool | float) -> tuple[Fraction | None, _Coef]:
        x = complex(x)
        if not isinstance(z, (bool, np.bool_)):
            x = complex(x.real if abs(x.real) > z else 0.0, x.imag if abs(x.imag) > z else 0.0)
            z = x == 0
        if z:
            return Fraction(0), _Coef(x, Fraction(0))
        f = simple_rational(x.real) if x.imag == 0.0 else None
        return f, _Coef(x, f)

    if c.ndim == 1:
        pairs = [one(x, z) for x, z in zip(c, zero)]
        return tuple(p[0] for p in pairs), [p[1] for p in pairs]
    fr, co = [], []
    for ck, fk in zip(c, zero):
        pairs = [[one(x, float(fk[0, 0])) for x in row] for row in ck]
        fr.append(tuple(tuple(p[0] for p in row) for row in pairs))
        co.append([[p[1] for p in row] for row in pairs])
    return tuple(fr), co


def _tol_words(tol: float | None, rtol: float | None) -> tuple[str, str]:
    if rtol is not None:
        pct = f"{100 * rtol:.3g}"
        return f"{pct} %", f"${pct}\\,\\%$"
    return f"within {tol:.3g}", f"within ${_tex_float(tol, 3)}$"


def _find_range(model: Model, target: Any, order: int, dirs: tuple[int, ...], search: dict, var_tex: str,
                scale: float | None, unit: str | None, *, tol: float | None = None, rtol: float | None = None) -> ValidityRange:
    """The validity range for one tolerance: one validity_boundary per direction."""
    found = [validity_boundary(model, target, order, tol=tol, rtol=rtol, direction=d, **search) for d in dirs]
    by_dir = {b.direction: b for b in found}
    words, words_tex = _tol_words(tol, rtol)
    text, tex = _range_words(by_dir, var_tex, scale, unit)
    if all(b.status == "exact_in_sector" for b in found):
        # (why: the treatment's reason, in notes)
        text = tex = f"{EXACT_IN_SECTOR}: no tolerance is judged"
    else:
        text, tex = f"valid to {words} {text}", f"valid to {words_tex} {tex}"
    return ValidityRange(
        tol=tol, rtol=rtol,
        lower=float(by_dir[-1].coupling) if -1 in by_dir else 0.0,
        upper=float(by_dir[1].coupling) if 1 in by_dir else 0.0,
        boundaries=tuple(found), text=text, latex=tex,
    )


def _range_words(by_dir: dict, var_tex: str, scale: float | None, unit: str | None) -> tuple[str, str]:
    """(plain, LaTeX) of a range, e.g. ('for |λ| < 0.0346', 'for $|\\lambda| < 0.0346$')."""
    if any(b.status == "ill_defined" for b in by_dir.values()):
        return ("(range undefined: the reference of the relative error passes through zero; use an absolute tol)",
                "(range undefined: the relative error is ill defined)")
    if all(b.status == "fails_at_zero" for b in by_dir.values()):
        return "at no coupling λ ≠ 0 searched", f"at no ${var_tex} \\neq 0$ searched"

    def side(d: int) -> tuple[str, str | None, bool]:
        """(|bound| text, physical |bound| text, strict) of one side; ('0', ..) if not searched or failing."""
        b = by_dir.get(d)
        if b is None or b.status == "fails_at_zero":
            return "0", "0", False
        mag = b.max_coupling if b.status == "not_reached" else abs(b.coupling)
        return _sig3_down(mag), None if scale is None else _sig3_down(mag * abs(scale)), b.status == "found"

    lo, hi = side(-1), side(1)
    tail = " (search limit)" if any(b.status == "not_reached" for b in by_dir.values()) else ""
    rel = {True: ("<", "<"), False: ("≤", r"\leq")}
    unit_txt = f" {unit}" if unit else ""
    unit_tex = f" {_tex_text(unit)}" if unit else ""
    if lo[0] == hi[0] != "0" and lo[2] == hi[2]:
        r_txt, r_tex = rel[hi[2]]
        phys = "" if scale is None else f" ({hi[1]}{unit_txt})"
        phys_tex = "" if scale is None else f" (${hi[1]}${unit_tex})"
        return f"for |λ| {r_txt} {hi[0]}{phys}{tail}", f"for $|{var_tex}| {r_tex} {hi[0]}${phys_tex}{tail}"
    a, b = ("−" + lo[0] if lo[0] != "0" else "0"), hi[0]
    ra, rb = rel[lo[2]], rel[hi[2]]
    phys = phys_tex = ""
    if scale is not None:
        p_lo = "−" + lo[1] if lo[0] != "0" else "0"
        p_hi = hi[1] if hi[0] != "0" else "0"
        if scale < 0:
            p_lo, p_hi = ("−" + p_hi if p_hi != "0" else "0"), p_lo.lstrip("−")
        phys = f" ({p_lo} to {p_hi}{unit_txt})"
        phys_tex = f" (${p_lo.replace('−', '-')}$ to ${p_hi.replace('−', '-')}${unit_tex})"
    return (
        f"for {a} {ra[0]} λ {rb[0]} {b}{phys}{tail}",
        f"for ${a.replace('−', '-')} {ra[1]} {var_tex} {rb[1]} {b}${phys_tex}{tail}",
    )


def _curve_grid(ranges: list[ValidityRange], dirs: tuple[int, ...]) -> np.ndarray:
    """201 couplings reaching 1.5 x the widest boundary found (else the search limit) on the sides searched."""
    bs = [b for r in ranges for b in r.boundaries]
    found = [abs(b.coupling) for b in bs if b.status == "found"]
    limits = [b.max_coupling for b in bs if b.status == "not_reached"]
    other = [2.0 * float(b.bracket[1]) for b in bs if b.status != "found" and len(b.bracket) > 1 and np.isfinite(b.bracket[1])]
    top = next((1.5 * max(x) for x in (found, limits, other) if x and np.isfinite(max(x)) and max(x) > 0), 1.0)
    return np.linspace(-top if -1 in dirs else 0.0, top if 1 in dirs else 0.0, 201)


def _doc_text(s: str) -> str:
    """Text safe inside a triple-quoted docstring."""
    return str(s).replace("\\", "\\\\").replace('"""', '\\"\\"\\"')


def _python_source(part: _Part, variable, expression, *, model, params, order, ranges, quantity, scale, unit,
                   version) -> str:
    kind, function_name, what = part.kind, part.function_name, part.what
    lines = [
        what,
        "",
        f"Model: {model.name}" + (f"; parameters: {', '.join(f'{k}={v!r}' for k, v in params.items())}" if params else ""),
        f"Coupling {variable} = lambda in H = H0 + lambda V (dimensionless); energies in the units of H0."
        + (f" lambda = 1 is {scale:g} {unit or ''}".rstrip() + "." if scale is not None else ""),
        f"Checked against exact diagonalisation (ptcheck {version}):",
    ]
    sym = "Q" if quantity is not None else "E"
    if quantity is not None and quantity.relative_to == "value":
        ref = f"|{sym}_exact|"
    else:
        ref = f"|{sym}_exact - {sym}({variable}=0)|"
    for r in ranges:
        err = (f"relative error |{sym} - {sym}_exact| / {ref}" if r.rtol is not None
               else f"absolute error |{sym} - {sym}_exact| in the units of H0")
        lines.append(f"  {r.text.replace('λ', variable)}  ({err})")
    lines.append("Outside these ranges the formula does not meet these tolerances.")
    wrapped = [w for x in lines for w in (textwrap.wrap(x, width=96, subsequent_indent=x[: len(x) - len(x.lstrip())]) or [""])]
    doc = "\n".join(("    " + _doc_text(x)) if x else "" for x in wrapped).lstrip()
    if kind == "effective_hamiltonian":
        body = "return [\n" + "".join(f"        {row},\n" for row in _split_rows(expression)) + "    ]"
    else:
        body = f"return {expression}"
    return f'def {function_name}({variable}):\n    """{doc}\n    """\n    {body}\n'


def _split_rows(matrix_text: str) -> list[str]:
    """The rows ``[...]`` of a nested-list text ``[[...], [...]]``."""
    inner = matrix_text[1:-1]
    rows, depth, start = [], 0, 0
    for i, ch in enumerate(inner):
        if ch == "[":
            depth += 1
            if depth == 1:
                start = i
        elif ch == "]":
            depth -= 1
            if depth == 0:
                rows.append(inner[start : i + 1])
    return rows
