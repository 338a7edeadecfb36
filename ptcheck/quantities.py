"""Derived quantities: named linear combinations of level energies.

A transition frequency, a dispersive shift χ, a ZZ coupling or an exchange J
is a combination ``Σ_i w_i E_i`` of levels; its perturbative error is not the
error of any one level.  A :class:`Quantity` is accepted wherever a level is
(``compare``, ``validity_boundary``, ``convergence``).

Ready-made quantities (labels ``(j_0, j_1, …)`` are product-state quantum
numbers, see :func:`ptcheck.products.product_model`):

==========================  ===============================================  =========
constructor                 definition                                       kind
==========================  ===============================================  =========
:func:`transition_frequency`  ``E_upper − E_lower``                          transition
:func:`stark_shift`           same, errors relative to its change with λ     stark_shift
:func:`dispersive_shift`      ``χ = (E_11 − E_10 − E_01 + E_00) / 2``        dispersive_shift
:func:`zz_coupling`           ``ζ = E_11 − E_10 − E_01 + E_00``              zz
:func:`cross_kerr`            ``K = E_11 − E_10 − E_01 + E_00``              cross_kerr
:func:`anharmonicity`         ``α = E_2 − 2 E_1 + E_0`` along one subsystem  anharmonicity
:func:`exchange`              ``J = E_triplet − E_singlet``                  exchange
:func:`combination`           any weights                                    combination
==========================  ===============================================  =========

Sign convention of χ (the one of Blais et al., Phys. Rev. A 69, 062320
(2004) and Koch et al., Phys. Rev. A 76, 042319 (2007)): the dispersive
Hamiltonian ``(ω_r + χ σ_z) a†a`` with ``σ_z = +1`` in the excited qubit state
gives a resonator frequency ``ω_r ± χ``, so ``2χ`` is the resonator frequency
with the qubit excited minus the one with the qubit in its ground state.
With ``Δ = ω_q − ω_r`` the Jaynes–Cummings result is ``χ = g²/Δ`` (positive
for a qubit above the resonator).  Papers that quote the full shift call
``2χ`` "χ"; divide by two before comparing.

:func:`quantity_series` gives the perturbative series of a quantity
(:class:`QuantitySeries`): the same combination of its levels' series, the
first order that survives cancellation, and -- where a published leading-order
formula is registered for the model (:data:`CLOSED_FORMS`) or given by the
user -- the closed-form value beside the computed coefficient.
"""

from __future__ import annotations

import html
import math
import numbers
from collections.abc import Callable, Hashable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from .approximants import OrderSpec
from .degeneracy import DEFAULT_MIXING_THRESHOLD
from .errors import AmbiguousLevelError, DegenerateLevelError
from ._good_states import group_branches, natural_scales
from .model import Model
from .series import rs_series
from .treatment import DEFAULT_TREATMENT, CheckSettings, expansions

__all__ = [
    "Quantity",
    "QuantitySeries",
    "ClosedForm",
    "CLOSED_FORMS",
    "CANCELLATION_RTOL",
    "combination",
    "transition_frequency",
    "stark_shift",
    "dispersive_shift",
    "zz_coupling",
    "cross_kerr",
    "anharmonicity",
    "exchange",
    "quantity_series",
    "leading_order_formula",
    "quantity_radius",
]

#: Default relative tolerance below which a quantity's order-k coefficient
#: counts as an exact cancellation of its levels' order-k coefficients.
CANCELLATION_RTOL = 1e-10

#: Floor of the cancellation test relative to the natural size of an order-k
#: coefficient, ``‖V‖ (‖V‖ / gap)^(k−1)`` (catches orders that vanish by symmetry,
#: whose level coefficients are rounding noise).
_NOISE_RTOL = 1e-12


# ====================================================================== Quantity
def _clean_key(k: Any, qname: str) -> Hashable:
    if isinstance(k, (bool, np.bool_)):
        raise TypeError(f"Quantity {qname!r}: level {k!r} must be an energy rank (int) or a label, not a bool")
    if isinstance(k, (int, np.integer)):
        if int(k) < 0:
            raise ValueError(f"Quantity {qname!r}: level {k!r} is a negative energy rank; ranks start at 0")
        return int(k)
    if isinstance(k, numbers.Real):
        raise TypeError(
            f"Quantity {qname!r}: level {k!r} must be an energy rank (int) or a label such as (1, 0); got a {type(k).__name__}"
        )
    if isinstance(k, tuple):
        return tuple(int(x) if isinstance(x, np.integer) else x for x in k)
    return k


@dataclass(frozen=True)
class Quantity:
    """A named linear combination ``Σ w_i E_i`` of level energies.

    Parameters
    ----------
    name : str
        Short name used in tables and figures (e.g. ``"chi"``).
    weights : mapping of level key -> float
        Level keys are energy ranks (int) or labels (e.g. ``(1, 0)``).
    units : str, optional
        Units of the quantity (the units of H0 by default).
    relative_to : {"value", "shift"}, default "value"
        Denominator of the relative error: the exact value of the quantity
        itself, or its change from the unperturbed value.
    kind : str, keyword-only, default "combination"
        What the quantity is (``"dispersive_shift"``, ``"zz"``, ...); selects
        registered closed forms (:data:`CLOSED_FORMS`).
    closed_form : (str, float), keyword-only, optional
        A leading-order formula and its value (energy units, at the physical
        coupling λ = 1), shown beside the computed coefficient, e.g.
        ``("g²/Δ", 0.01)``.
    closed_form_order : int, keyword-only, optional
        The order the closed form belongs to (default: the first order at
        which the quantity's series is non-zero).

    Examples
    --------
    >>> chi = Quantity("chi", {(1, 1): .5, (1, 0): -.5, (0, 1): -.5, (0, 0): .5})
    >>> chi.expression()
    '0.5 E|1,1⟩ − 0.5 E|1,0⟩ − 0.5 E|0,1⟩ + 0.5 E|0,0⟩'
    """

    name: str
    weights: Mapping[Hashable, float] = field(hash=False)
    units: str = ""
    relative_to: str = "value"
    kind: str = field(default="combination", kw_only=True)
    closed_form: tuple[str, float] | None = field(default=None, kw_only=True)
    closed_form_order: int | None = field(default=None, kw_only=True)

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name:
            raise TypeError(f"Quantity name must be a non-empty str; got {self.name!r}")
        if not isinstance(self.weights, Mapping) or not self.weights:
            raise ValueError(f"Quantity {self.name!r} needs a non-empty mapping level -> weight; got {self.weights!r}")
        clean: dict[Hashable, float] = {}
        for k, w in self.weights.items():
            key = _clean_key(k, self.name)
            if isinstance(w, (bool, np.bool_)) or isinstance(w, (complex, np.complexfloating)):
                raise TypeError(f"Quantity {self.name!r}: weight of level {k!r} must be a real number; got {w!r}")
            try:
                wf = float(w)
            except (TypeError, ValueError):
                raise TypeError(f"Quantity {self.name!r}: weight of level {k!r} must be a number; got {w!r}") from None
            if not np.isfinite(wf):
                raise ValueError(f"Quantity {self.name!r}: weight of level {k!r} is not finite ({w!r})")
            clean[key] = clean.get(key, 0.0) + wf
        object.__setattr__(self, "weights", clean)
        if not isinstance(self.units, str):
            raise TypeError(f"Quantity {self.name!r}: units must be a str; got {self.units!r}")
        val.check_choice(self.relative_to, "relative_to", ("value", "shift"))
        if not isinstance(self.kind, str) or not self.kind:
            raise TypeError(f"Quantity {self.name!r}: kind must be a non-empty str; got {self.kind!r}")
        if self.closed_form is not None:
            cf = self.closed_form
            if not (isinstance(cf, tuple) and len(cf) == 2 and isinstance(cf[0], str)):
                raise TypeError(
                    f"Quantity {self.name!r}: closed_form must be a (formula text, value) tuple, e.g. ('g²/Δ', 0.01); got {cf!r}"
                )
            try:
                v = float(cf[1])
            except (TypeError, ValueError):
                raise TypeError(f"Quantity {self.name!r}: closed_form value must be a real number; got {cf[1]!r}") from None
            if not np.isfinite(v):
                raise ValueError(f"Quantity {self.name!r}: closed_form value is not finite ({cf[1]!r})")
            object.__setattr__(self, "closed_form", (cf[0], v))
        if self.closed_form_order is not None:
            val.check_int(self.closed_form_order, f"Quantity {self.name!r}: closed_form_order", minimum=0)

    # ------------------------------------------------------------------ levels
    @property
    def levels(self) -> tuple:
        """The level keys, in the order given."""
        return tuple(self.weights)

    def resolve(self, model: Any) -> dict[int, float]:
        """Work-basis level index -> weight (weights of repeated levels add up).

        Raises
        ------
        AmbiguousLevelError
            A level of the quantity is an ambiguous label (exactly degenerate
            group mixed by V); the message names the quantity and the level.
        ValueError
            A level is not in the model, or the weights cancel identically.
        """
        out: dict[int, float] = {}
        for k, w in self.weights.items():
            try:
                i = model.level_index(k)
            except AmbiguousLevelError as exc:
                raise AmbiguousLevelError(f"quantity {self.name!r} uses level {k!r}: {exc}") from None
            except ValueError as exc:
                hint = ""
                dims = getattr(model, "dims", None)
                if isinstance(k, tuple) and dims is not None and len(k) != len(dims):
                    hint = f" (the label has {len(k)} quantum numbers; the model has dims {tuple(dims)})"
                elif isinstance(k, tuple) and dims is None:
                    hint = " (the model has no product labels; build it with dims=... or ptcheck.products.product_model)"
                raise ValueError(f"quantity {self.name!r} uses level {k!r}, which model {model.name!r} does not have{hint}: {exc}") from None
            out[i] = out.get(i, 0.0) + w
        out = {i: w for i, w in out.items() if w != 0.0}
        if not out:
            raise ValueError(
                f"quantity {self.name!r} is identically zero on model {model.name!r}: its weights cancel "
                f"({self.expression()} names the same levels with opposite weights)"
            )
        return out

    def expression(self) -> str:
        """The combination as text, e.g. ``'E|1,0⟩ − E|0,0⟩'``."""
        parts = []
        for i, (k, w) in enumerate(self.weights.items()):
            name = _key_text(k)
            mag = abs(w)
            coef = "" if mag == 1.0 else f"{mag:g} "
            sign = ("−" if w < 0 else "") if i == 0 else (" − " if w < 0 else " + ")
            parts.append(f"{sign}{coef}E{name}")
        return "".join(parts)

    def __str__(self) -> str:
        return self.name


def _key_text(k: Any) -> str:
    if isinstance(k, tuple):
        return "|" + ",".join(str(x) for x in k) + "⟩"
    if isinstance(k, int):
        return f"[n={k}]"
    return f"[{k}]"


# ====================================================================== constructors
def _check_name(name: Any, default: str) -> str:
    if name is None:
        return default
    if not isinstance(name, str) or not name:
        raise TypeError(f"name must be a non-empty str; got {name!r}")
    return name


def _axes(axes: Any, n_subsystems: Any, what: str) -> tuple[int, ...]:
    n = val.check_int(n_subsystems, "n_subsystems", minimum=1)
    out = []
    for a in axes:
        a = val.check_int(a, f"{what} axis", minimum=0)
        if a >= n:
            raise ValueError(f"{what} axis must be in 0..{n - 1} for n_subsystems={n}; got {a}")
        out.append(a)
    if len(set(out)) != len(out):
        raise ValueError(f"{what} axes must be different subsystems; got {tuple(out)}")
    return tuple(out)


def _product_label(n: int, assign: Mapping[int, int]) -> tuple[int, ...]:
    lab = [0] * n
    for axis, q in assign.items():
        lab[axis] = q
    return tuple(lab)


def _pair_axes(axes: Any, n_subsystems: int, what: str) -> tuple[int, int]:
    try:
        a, b = axes
    except (TypeError, ValueError):
        raise TypeError(f"{what} axes must be a pair of subsystem indices, e.g. (0, 1); got {axes!r}") from None
    return _axes((a, b), n_subsystems, what)  # type: ignore[return-value]


def _two_excitation_weights(a: int, b: int, n: int, scale: float) -> dict:
    return {
        _product_label(n, {a: 1, b: 1}): scale,
        _product_label(n, {a: 1, b: 0}): -scale,
        _product_label(n, {a: 0, b: 1}): -scale,
        _product_label(n, {a: 0, b: 0}): scale,
    }


def combination(
    name: str,
    weights: Mapping[Hashable, float],
    *,
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Any linear combination of levels (kind ``"combination"``).

    Parameters
    ----------
    name : str
    weights : mapping level key -> float
        Energy ranks (int) or labels.
    units, relative_to, closed_form, closed_form_order
        See :class:`Quantity`.

    Examples
    --------
    >>> combination("two-photon", {(0, 2): 1, (0, 0): -1}).expression()
    'E|0,2⟩ − E|0,0⟩'
    """
    return Quantity(name, weights, units, relative_to, kind="combination", closed_form=closed_form, closed_form_order=closed_form_order)


def transition_frequency(
    upper: Hashable,
    lower: Hashable,
    *,
    name: str | None = None,
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Transition frequency ``E_upper − E_lower`` (ħ = 1; energy units).

    Parameters
    ----------
    upper, lower : level key
        Energy ranks or labels, e.g. ``(1, 0)`` and ``(0, 0)``.
    name : str, optional
        Default ``"ω(|1,0⟩→|0,0⟩)"``.
    relative_to : {"value", "shift"}, default "value"
        Relative errors against the frequency itself; use ``"shift"`` (or
        :func:`stark_shift`) to judge its change with the coupling.

    Examples
    --------
    >>> transition_frequency((1, 0), (0, 0)).name
    'ω(|1,0⟩→|0,0⟩)'
    """
    name = _check_name(name, f"ω({_key_text(upper).strip('[]')}→{_key_text(lower).strip('[]')})")
    if _hashable_eq(upper, lower):
        raise ValueError(f"transition_frequency {name!r}: upper and lower are the same level {upper!r}")
    return Quantity(
        name, {upper: 1.0, lower: -1.0}, units, relative_to,
        kind="transition", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def stark_shift(
    upper: Hashable,
    lower: Hashable | None = None,
    *,
    name: str | None = None,
    units: str = "",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Shift of a transition frequency (or of one level) caused by the coupling.

    The value is ``E_upper − E_lower`` (or ``E_upper``), including its
    unperturbed part; relative errors are taken against its *change* from the
    unperturbed value (``relative_to="shift"``), which is what a Stark, Lamb or
    Bloch–Siegert shift measures.

    Parameters
    ----------
    upper : level key
    lower : level key, optional
        Omit for the shift of a single level.
    name : str, optional
        Default ``"δω(|1,0⟩→|0,0⟩)"`` or ``"δE|1,0⟩"``.

    Examples
    --------
    >>> stark_shift((1, 0), (0, 0)).relative_to
    'shift'
    """
    if lower is None:
        name = _check_name(name, f"δE{_key_text(upper)}")
        weights = {upper: 1.0}
    else:
        name = _check_name(name, f"δω({_key_text(upper).strip('[]')}→{_key_text(lower).strip('[]')})")
        if _hashable_eq(upper, lower):
            raise ValueError(f"stark_shift {name!r}: upper and lower are the same level {upper!r}")
        weights = {upper: 1.0, lower: -1.0}
    return Quantity(name, weights, units, "shift", kind="stark_shift", closed_form=closed_form, closed_form_order=closed_form_order)


def dispersive_shift(
    qubit_axis: int = 0,
    *,
    resonator_axis: int | None = None,
    n_subsystems: int = 2,
    name: str = "chi",
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Dispersive shift ``χ = (E_11 − E_10 − E_01 + E_00) / 2``.

    Labels are written ``(q, r)`` with the qubit quantum number on
    ``qubit_axis`` and the resonator photon number on ``resonator_axis``
    (other subsystems in their ground state 0).  ``2χ`` is the resonator
    frequency with the qubit excited minus the one with the qubit in its
    ground state (equivalently: the change of the qubit frequency when one
    photon is added), so χ is symmetric in the two axes; the axes only say
    which subsystems of the model the labels refer to.  Sign convention of
    Blais et al., Phys. Rev. A 69, 062320 (2004): ``χ = g²/Δ``, Δ = ω_q − ω_r,
    for the Jaynes–Cummings model; for a Kerr-ladder (transmon) qubit Koch
    et al., Phys. Rev. A 76, 042319 (2007): ``χ = χ_01 − χ_12/2 =
    g² α / (Δ (Δ + α))``.

    Parameters
    ----------
    qubit_axis : int, default 0
        Subsystem index of the qubit in the model's labels.
    resonator_axis : int, optional
        Subsystem index of the resonator (default: the other one when
        ``n_subsystems == 2``; required otherwise).
    n_subsystems : int, default 2
        Number of subsystems (length of the labels).
    name, units, relative_to, closed_form, closed_form_order
        See :class:`Quantity`.

    Examples
    --------
    >>> chi = dispersive_shift()          # labels (q, r), qubit first
    >>> chi.weights[(1, 1)], chi.weights[(1, 0)]
    (0.5, -0.5)
    >>> dispersive_shift(1).weights == chi.weights   # resonator first: same χ
    True
    """
    n = val.check_int(n_subsystems, "n_subsystems", minimum=2)
    if resonator_axis is None:
        if n != 2:
            raise ValueError(f"dispersive_shift: give resonator_axis when n_subsystems = {n} > 2")
        (q,) = _axes((qubit_axis,), n, "qubit")
        r = 1 - q
    else:
        q, r = _axes((qubit_axis, resonator_axis), n, "qubit/resonator")
    name = _check_name(name, "chi")
    return Quantity(
        name, _two_excitation_weights(q, r, n, 0.5), units, relative_to,
        kind="dispersive_shift", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def zz_coupling(
    axes: tuple[int, int] = (0, 1),
    *,
    n_subsystems: int = 2,
    name: str = "zeta",
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Static ZZ interaction ``ζ = E_11 − E_10 − E_01 + E_00`` of two qubits.

    ``ζ`` is the change of one qubit's frequency when the other is excited
    (``H_ZZ = ζ |11⟩⟨11|``; in Pauli form ``(ζ/4) Z⊗Z``).

    Parameters
    ----------
    axes : (int, int), default (0, 1)
        The two qubits' subsystem indices in the labels.
    n_subsystems : int, default 2
    name, units, relative_to, closed_form, closed_form_order
        See :class:`Quantity`.

    Examples
    --------
    >>> zz_coupling().expression()
    'E|1,1⟩ − E|1,0⟩ − E|0,1⟩ + E|0,0⟩'
    """
    n = val.check_int(n_subsystems, "n_subsystems", minimum=2)
    a, b = _pair_axes(axes, n, "zz")
    return Quantity(
        _check_name(name, "zeta"), _two_excitation_weights(a, b, n, 1.0), units, relative_to,
        kind="zz", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def cross_kerr(
    axes: tuple[int, int] = (0, 1),
    *,
    n_subsystems: int = 2,
    name: str = "K",
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Cross-Kerr coefficient ``K = E_11 − E_10 − E_01 + E_00`` of two modes.

    The coefficient of ``K a†a b†b`` in an effective Hamiltonian (the same
    combination as :func:`zz_coupling`, named for bosonic modes).

    Examples
    --------
    >>> cross_kerr().weights[(0, 0)]
    1.0
    """
    n = val.check_int(n_subsystems, "n_subsystems", minimum=2)
    a, b = _pair_axes(axes, n, "cross_kerr")
    return Quantity(
        _check_name(name, "K"), _two_excitation_weights(a, b, n, 1.0), units, relative_to,
        kind="cross_kerr", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def anharmonicity(
    axis: int = 0,
    *,
    n_subsystems: int = 2,
    name: str = "alpha",
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Anharmonicity (self-Kerr) ``α = E_2 − 2 E_1 + E_0`` of one subsystem.

    Levels ``(…, j, …)`` with ``j = 0, 1, 2`` on ``axis`` and the other
    subsystems in their ground state.

    Examples
    --------
    >>> anharmonicity(1).expression()
    'E|0,2⟩ − 2 E|0,1⟩ + E|0,0⟩'
    """
    n = val.check_int(n_subsystems, "n_subsystems", minimum=1)
    (a,) = _axes((axis,), n, "anharmonicity")
    w = {_product_label(n, {a: 2}): 1.0, _product_label(n, {a: 1}): -2.0, _product_label(n, {a: 0}): 1.0}
    return Quantity(
        _check_name(name, "alpha"), w, units, relative_to,
        kind="anharmonicity", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def exchange(
    triplet: Hashable,
    singlet: Hashable,
    *,
    name: str = "J",
    units: str = "",
    relative_to: str = "value",
    closed_form: tuple[str, float] | None = None,
    closed_form_order: int | None = None,
) -> Quantity:
    """Exchange splitting ``J = E_triplet − E_singlet``.

    With this sign an antiferromagnetic exchange (singlet below the triplet,
    ``H = J S_1·S_2``) is positive, e.g. ``J = 4t²/U`` for the half-filled
    Hubbard dimer (Anderson superexchange).

    Parameters
    ----------
    triplet, singlet : level key
        Energy ranks or labels of one triplet level and the singlet level.
        When the spin states are exactly degenerate in H0 and split only by
        the coupling, address them by energy rank (e.g. ``exchange(1, 0)``
        for the two-site Hubbard model: at small λ the singlet is the lower
        branch of the block).

    Examples
    --------
    >>> exchange(1, 0).expression()
    'E[n=1] − E[n=0]'
    """
    name = _check_name(name, "J")
    if _hashable_eq(triplet, singlet):
        raise ValueError(f"exchange {name!r}: triplet and singlet are the same level {triplet!r}")
    return Quantity(
        name, {triplet: 1.0, singlet: -1.0}, units, relative_to,
        kind="exchange", closed_form=closed_form, closed_form_order=closed_form_order,
    )


def _hashable_eq(a: Any, b: Any) -> bool:
    try:
        return bool(a == b) and type(a) is type(b)
    except Exception:  # pragma: no cover - exotic label types
        return False


# ====================================================================== closed forms
@dataclass(frozen=True)
class ClosedForm:
    """A published leading-order formula for one quantity of one built-in model.

    Attributes
    ----------
    model : str
        ``Model.name`` the formula applies to (as set by the builder).
    kind : str
        ``Quantity.kind`` it applies to.
    weights : mapping level key -> float
        The quantity must be exactly this combination (same levels, same
        weights) for the formula to apply.
    order : int
        Perturbative order the formula is the coefficient of (at λ = 1).
    formula : str
        The formula in the usual symbols.
    source : str
        Where the formula comes from.
    evaluate : callable
        ``evaluate(model) -> (value, parameters_text)``: reads the parameters
        from ``model.params`` when the model has it, else from ``H0`` and ``V``
        (unperturbed energies and matrix elements between labelled levels).
    """

    model: str
    kind: str
    weights: Mapping[Hashable, float] = field(hash=False)
    order: int
    formula: str
    source: str
    evaluate: Callable[[Model], tuple[float, str]] = field(repr=False, hash=False)


def _param(model: Model, key: str) -> float | None:
    params = getattr(model, "params", None)
    if isinstance(params, Mapping) and key in params:
        return float(params[key])
    return None


def _e0(model: Model, label: Any) -> float:
    return float(model.e0[model.level_index(label)])


def _v(model: Model, a: Any, b: Any) -> float:
    return float(abs(model.v[model.level_index(a), model.level_index(b)]))


def _jc_chi(model: Model) -> tuple[float, str]:
    g = _param(model, "g")
    g = _v(model, (1, 0), (0, 1)) if g is None else abs(g)
    wq, wr = _param(model, "omega_q"), _param(model, "omega_r")
    delta = (_e0(model, (1, 0)) - _e0(model, (0, 1))) if wq is None or wr is None else wq - wr
    return g**2 / delta, f"g = {g:.6g}, Δ = ω_q − ω_r = {delta:.6g}"


def _kerr_chi(model: Model) -> tuple[float, str]:
    g = _param(model, "g")
    g = _v(model, (1, 0), (0, 1)) if g is None else abs(g)
    wq, wr, al = _param(model, "omega_q"), _param(model, "omega_r"), _param(model, "alpha")
    if wq is None or wr is None or al is None:
        delta = _e0(model, (1, 0)) - _e0(model, (0, 1))
        al = _e0(model, (2, 0)) - 2 * _e0(model, (1, 0)) + _e0(model, (0, 0))
    else:
        delta = wq - wr
    return g**2 * al / (delta * (delta + al)), f"g = {g:.6g}, Δ = ω_q − ω_r = {delta:.6g}, α = {al:.6g}"


def _kerr_zz(model: Model) -> tuple[float, str]:
    j = _param(model, "j")
    j = _v(model, (1, 0), (0, 1)) if j is None else abs(j)
    w1, w2, a1, a2 = (_param(model, k) for k in ("omega1", "omega2", "alpha1", "alpha2"))
    if None in (w1, w2, a1, a2):
        e00 = _e0(model, (0, 0))
        delta = _e0(model, (1, 0)) - _e0(model, (0, 1))
        a1 = _e0(model, (2, 0)) - 2 * _e0(model, (1, 0)) + e00
        a2 = _e0(model, (0, 2)) - 2 * _e0(model, (0, 1)) + e00
    else:
        delta = w1 - w2
    value = 2 * j**2 * (a1 + a2) / ((delta + a1) * (delta - a2))
    return value, f"J = {j:.6g}, Δ = ω1 − ω2 = {delta:.6g}, α1 = {a1:.6g}, α2 = {a2:.6g}"


def _hubbard_j(model: Model) -> tuple[float, str]:
    t, u = _param(model, "t"), _param(model, "u")
    if t is None or u is None:
        u = _e0(model, "↑↓,0") - _e0(model, "↑,↓")
        t = _v(model, "↑↓,0", "↑,↓")
    return 4 * t**2 / u, f"t = {abs(t):.6g}, U = {u:.6g}"


_CHI_W = {(1, 1): 0.5, (1, 0): -0.5, (0, 1): -0.5, (0, 0): 0.5}
_ZZ_W = {(1, 1): 1.0, (1, 0): -1.0, (0, 1): -1.0, (0, 0): 1.0}

#: Registered leading-order closed forms, keyed by (model name, quantity kind).
#: Used by :func:`leading_order_formula` when the quantity carries none.
CLOSED_FORMS: tuple[ClosedForm, ...] = (
    ClosedForm(
        "Jaynes–Cummings", "dispersive_shift", _CHI_W, 2, "g²/Δ",
        "Blais et al., Phys. Rev. A 69, 062320 (2004), dispersive Hamiltonian", _jc_chi,
    ),
    ClosedForm(
        "Kerr qubit–resonator (RWA)", "dispersive_shift", _CHI_W, 2, "g²α/(Δ(Δ+α))",
        "Koch et al., Phys. Rev. A 76, 042319 (2007): χ = χ_01 − χ_12/2", _kerr_chi,
    ),
    ClosedForm(
        "coupled Kerr qubits", "zz", _ZZ_W, 2, "2J²(α1+α2)/((Δ+α1)(Δ−α2))",
        "second-order perturbation theory in J (Kerr-ladder qubits, exchange J(b1 b2† + h.c.))", _kerr_zz,
    ),
    ClosedForm(
        "Hubbard dimer", "exchange", {1: 1.0, 0: -1.0}, 2, "4t²/U",
        "Anderson superexchange (P. W. Anderson, Phys. Rev. 115, 2 (1959))", _hubbard_j,
    ),
)


def _closed_form(model: Model, quantity: Quantity) -> tuple[str, float, int | None, str] | None:
    """(formula text, value, order or None, source) for a quantity on a model, or None."""
    if quantity.closed_form is not None:
        text, value = quantity.closed_form
        return text, value, quantity.closed_form_order, "given by the user"
    for cf in CLOSED_FORMS:
        if cf.model != model.name or quantity.kind not in (cf.kind, "combination"):
            continue
        try:
            if not _same_combination(model, quantity.resolve(model), cf.weights):
                continue
            value, params = cf.evaluate(model)
        except (ValueError, ZeroDivisionError, IndexError):
            continue
        if not np.isfinite(value):
            continue
        return f"{cf.formula} ({params})", float(value), cf.order, cf.source
    return None


def _same_combination(model: Model, resolved: Mapping[int, float], weights: Mapping[Hashable, float]) -> bool:
    want: dict[int, float] = {}
    for k, w in weights.items():
        i = model.level_index(k)
        want[i] = want.get(i, 0.0) + w
    if set(want) != set(resolved):
        return False
    return all(abs(want[i] - resolved[i]) <= 1e-12 * max(1.0, abs(want[i])) for i in want)


def leading_order_formula(model: Model, quantity: Quantity) -> tuple[str, float] | None:
    """The leading-order closed form a physicist would quote for this quantity.

    The quantity's own ``closed_form`` if it has one; otherwise the entry of
    :data:`CLOSED_FORMS` registered for ``(model.name, quantity.kind)``
    whose levels and weights match the quantity exactly (a hand-made
    ``Quantity`` of kind ``"combination"`` matches on its weights), evaluated with the
    model's parameters (``model.params`` if present, else read from the
    unperturbed energies and the matrix elements of ``V``); else ``None``.

    Parameters
    ----------
    model : Model
    quantity : Quantity

    Returns
    -------
    (str, float) or None
        Formula text (with the parameter values used) and its value in
        energy units at λ = 1.

    Examples
    --------
    >>> from ptcheck.models import jaynes_cummings
    >>> text, value = leading_order_formula(jaynes_cummings(omega_q=5, omega_r=6, g=0.1, n_photons=4), dispersive_shift())
    >>> text, round(value, 12)
    ('g²/Δ (g = 0.1, Δ = ω_q − ω_r = -1)', -0.01)
    """
    _check_model_quantity(model, quantity)
    cf = _closed_form(model, quantity)
    return None if cf is None else (cf[0], cf[1])


# ====================================================================== series
def _ro(a: Any) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


_SUP = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def _power(k: int) -> str:
    if k == 0:
        return ""
    if k == 1:
        return " λ"
    return " λ" + str(k).translate(_SUP)


@dataclass(frozen=True, repr=False, eq=False)
class QuantitySeries:
    """Perturbative series of a derived quantity: ``Σ_i w_i E_i(λ)``.

    Attributes
    ----------
    name : str
        Quantity name.
    units : str
        Quantity units ("" = the units of H0).
    model_name : str
    order : int
        Highest order computed.
    levels : tuple of int
        Work-basis indices of the levels used (length L).
    labels : tuple of str
        Printable names of the levels (e.g. ``"|1,0⟩"``).
    weights : tuple of float
        Weight of each level (length L).
    treatments : tuple of str
        Treatment used for each level: ``"nondegenerate"``, ``"degenerate"``
        or ``"near-degenerate block"`` (:mod:`ptcheck.treatment`).
    coefficients : (order + 1,) ndarray or None, read-only
        Taylor coefficients ``Q^(k)`` of the quantity, ``Q(λ) = Σ_k λ^k Q^(k)``
        (energy units): ``Σ_i w_i E_i^(k)``.  Non-degenerate levels contribute
        their Rayleigh–Schrödinger coefficients; levels treated with an effective
        Hamiltonian (degenerate group or near-degenerate block) the Taylor
        coefficients of their eigenvalue branch (see Notes).
        ``None`` when some level has no scalar series here (``notes`` says
        which and why).
    level_coefficients : (L, order + 1) ndarray, read-only
        Each level's Taylor coefficients; a row of NaN where none is available.
    first_nonzero_order : int or None
        First k with ``Q^(k)`` non-zero beyond cancellation noise: ``|Q^(k)| >
        rtol Σ_i |w_i E_i^(k)| + 1e-12 Σ_i |w_i| s_k``, with ``rtol`` the
        ``cancellation_rtol`` asked for and ``s_k = ‖V‖ (‖V‖/gap)^(k−1)`` the
        natural size of an order-k coefficient.  ``None`` if no computed order
        survives (or no scalar series exists).
    leading_term : str
        The leading behaviour in words, e.g. ``"chi ≈ 0.01 λ² (order 2)"``.
    closed_form : (str, float) or None
        A leading-order formula and its value at λ = 1 (energy units), shown
        beside :attr:`closed_form_coefficient`.
    closed_form_order : int or None
        Order whose coefficient the closed form is compared with.
    relative_to : str
        The quantity's reference for relative errors.
    unperturbed : float
        Value at λ = 0, ``Σ_i w_i E_i^(0)`` (energy units).
    notes : tuple of str
        Plain-language remarks (block levels, cancellations, sources).
    reasons : tuple of str
        Why each level got its treatment (:mod:`ptcheck.treatment`).

    Notes
    -----
    :meth:`energy` is the value ``compare`` reports as perturbative: the same
    combination of the levels' truncated expansions (for a level treated
    with an effective Hamiltonian, the eigenvalue of the truncated effective Hamiltonian -- not the
    partial sum of its Taylor series; the two differ at order k + 1).
    """

    name: str
    units: str
    model_name: str
    order: int
    levels: tuple[int, ...]
    labels: tuple[str, ...]
    weights: tuple[float, ...]
    treatments: tuple[str, ...]
    coefficients: np.ndarray | None
    level_coefficients: np.ndarray
    first_nonzero_order: int | None
    leading_term: str
    closed_form: tuple[str, float] | None
    closed_form_order: int | None
    relative_to: str
    unperturbed: float
    notes: tuple[str, ...]
    quantity: Quantity = field(repr=False)
    _expansions: tuple = field(repr=False)
    reasons: tuple[str, ...] = ()

    # ------------------------------------------------------------------ values
    def energy(self, couplings: Any, order: OrderSpec | None = None) -> np.ndarray:
        """Perturbative value ``Σ_i w_i E_i(λ)`` at ``couplings`` (energy units).

        Parameters
        ----------
        couplings : float or (C,) array_like
            Couplings λ (dimensionless).
        order : int or Pade, optional
            Truncation order (or Padé spec, non-degenerate levels only) applied
            to every level; default: the full computed order.

        Returns
        -------
        ndarray, shape of ``couplings``
        """
        lam = np.asarray(couplings, dtype=float)
        if not np.all(np.isfinite(lam)):
            raise ValueError(f"couplings must be finite; got {couplings!r}")
        acc = np.zeros(lam.shape)
        for w, e in zip(self.weights, self._expansions):
            acc = acc + w * np.asarray(e.energy(lam, order), dtype=float)
        return acc

    def term(self, couplings: Any, k: int) -> np.ndarray:
        """Size of the order-k contribution, shape of ``couplings``.

        ``|Q^(k) λ^k|`` when :attr:`coefficients` exists, else
        ``Σ_i |w_i| term_i(λ, k)`` (an upper bound).
        """
        k = val.check_int(k, "k", minimum=0, maximum=self.order)
        lam = np.asarray(couplings, dtype=float)
        if self.coefficients is not None:
            return np.abs(self.coefficients[k] * lam**k)
        acc = np.zeros(lam.shape)
        for w, e in zip(self.weights, self._expansions):
            acc = acc + abs(w) * np.asarray(e.term(lam, k), dtype=float)
        return acc

    @property
    def closed_form_coefficient(self) -> float | None:
        """The computed coefficient the closed form is compared with (``None`` if none)."""
        if self.closed_form is None or self.coefficients is None or self.closed_form_order is None:
            return None
        if self.closed_form_order > self.order:
            return None
        return float(self.coefficients[self.closed_form_order])

    # ------------------------------------------------------------------ output
    def _closed_text(self) -> str:
        if self.closed_form is None:
            return ""
        text, value = self.closed_form
        c = self.closed_form_coefficient
        if c is None:
            return f"closed form {text} = {value:.6g}"
        return f"order-{self.closed_form_order} coefficient {c:.6g} vs closed form {text} = {value:.6g}"

    def __repr__(self) -> str:
        cf = self._closed_text()
        return (
            f"QuantitySeries({self.name}, order={self.order}, first_nonzero_order={self.first_nonzero_order}, "
            f"{self.leading_term}" + (f"; {cf}" if cf else "") + ")"
        )

    def to_dict(self) -> dict:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        return {
            "name": self.name,
            "units": self.units,
            "model": self.model_name,
            "expression": self.quantity.expression(),
            "order": self.order,
            "levels": list(self.levels),
            "labels": list(self.labels),
            "weights": list(self.weights),
            "treatments": list(self.treatments),
            "reasons": list(self.reasons),
            "coefficients": None if self.coefficients is None else self.coefficients.tolist(),
            "level_coefficients": [[num(x) for x in row] for row in self.level_coefficients],
            "first_nonzero_order": self.first_nonzero_order,
            "leading_term": self.leading_term,
            "closed_form": None if self.closed_form is None else {"formula": self.closed_form[0], "value": self.closed_form[1]},
            "closed_form_order": self.closed_form_order,
            "closed_form_coefficient": self.closed_form_coefficient,
            "relative_to": self.relative_to,
            "unperturbed": self.unperturbed,
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        lv = "".join(
            f"<tr><td>{html.escape(lab)}</td><td>{w:+g}</td><td>{html.escape(t)}</td></tr>"
            for lab, w, t in zip(self.labels, self.weights, self.treatments)
        )
        if self.coefficients is not None:
            rows = "".join(
                f"<tr><td>{k}</td><td>{c:.10g}</td>"
                + (f"<td>{html.escape(self.closed_form[0])} = {self.closed_form[1]:.10g}</td>" if self.closed_form and k == self.closed_form_order else "<td></td>")
                + "</tr>"
                for k, c in enumerate(self.coefficients)
            )
            coef = f"<table><tr><th>k</th><th>{html.escape(self.name)}<sup>(k)</sup></th><th>closed form</th></tr>{rows}</table>"
        else:
            coef = "<p>No scalar series (see notes).</p>"
        cf = f"<p>{html.escape(self._closed_text())}</p>" if self.closed_form else ""
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>{html.escape(self.name)}</b> = {html.escape(self.quantity.expression())} "
            f"(model {html.escape(self.model_name)}), order {self.order}: {html.escape(self.leading_term)}"
            f"<table><tr><th>level</th><th>weight</th><th>treatment</th></tr>{lv}</table>{coef}{cf}"
            + (f"<ul>{notes}</ul>" if notes else "")
        )


def _check_model_quantity(model: Any, quantity: Any) -> None:
    if not isinstance(model, Model):
        raise TypeError(f"model must be a ptcheck.Model; got {type(model).__name__}")
    if not isinstance(quantity, Quantity):
        raise TypeError(
            f"quantity must be a ptcheck.Quantity (e.g. dispersive_shift(), transition_frequency((1, 0), (0, 0))); "
            f"got {quantity!r} -- for a single level use model.series(level, order)"
        )


def quantity_series(
    model: Model,
    quantity: Quantity,
    order: int,
    *,
    treatment: str = DEFAULT_TREATMENT,
    coupling: float | None = None,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
    method: str = "schrieffer-wolff",
    cancellation_rtol: float = CANCELLATION_RTOL,
) -> QuantitySeries:
    """Perturbative series of a quantity: the same combination of its levels' series.

    Parameters
    ----------
    model : Model
    quantity : Quantity
    order : int
        Highest order (>= 0).
    treatment : {"standard", "nondegenerate", "block", "auto"}, default "standard"
        Expansion of each level (:mod:`ptcheck.treatment`): by default the
        non-degenerate series, or degenerate perturbation theory for a level
        in an exactly degenerate group.
    coupling : float, optional
        Coupling of interest at which ``"block"``/``"auto"`` judge
        near-degeneracy (default: exact degeneracy only).  Use the coupling you
        will pass to ``compare`` to get the same treatment it uses.
    threshold : float
        Mixing-ratio threshold for ``"block"``/``"auto"``.
    method : str
        Method of near-degenerate blocks.
    cancellation_rtol : float, default :data:`CANCELLATION_RTOL`
        Relative tolerance of the cancellation test behind
        :attr:`QuantitySeries.first_nonzero_order`.

    Returns
    -------
    QuantitySeries

    Raises
    ------
    AmbiguousLevelError
        A level of the quantity is an ambiguous label (message names the
        quantity and the level).
    DegenerateLevelError
        ``treatment="nondegenerate"`` on an exactly degenerate level.
    ValueError, TypeError
        Bad input.

    Notes
    -----
    Taylor coefficients of a level treated with an effective Hamiltonian
    (degenerate group or near-degenerate block): for a level that is not
    exactly degenerate in H0 they are its Rayleigh–Schrödinger coefficients
    (the Taylor series of an analytic level is unique).  For a level in an
    exactly degenerate group they are computed from the group's
    Schrieffer–Wolff effective Hamiltonian: ``H_eff(λ) = E0 + λ M(λ)``, and the
    eigenvalue branches of the matrix polynomial ``M`` are expanded order by
    order (when ``M(0)`` is a multiple of the identity the common value is
    split off and the next order examined; a simple eigenvalue is expanded by
    Rayleigh–Schrödinger for a polynomial perturbation).  Branches are
    matched to the group's levels in ascending energy at small positive λ,
    the convention of :class:`~ptcheck.model.Model` and
    :func:`~ptcheck.blocks.block_series`.  Levels that stay degenerate with
    others at the order where their group splits get no scalar series.

    Examples
    --------
    >>> from ptcheck.models import jaynes_cummings
    >>> m = jaynes_cummings(omega_q=6.0, omega_r=5.0, g=0.1, n_photons=4)
    >>> s = quantity_series(m, dispersive_shift(), 4)
    >>> s.first_nonzero_order, round(float(s.coefficients[2]), 12)
    (2, 0.01)
    """
    _check_model_quantity(model, quantity)
    order = val.check_order(order, n=model.n)
    settings = CheckSettings(treatment=treatment, threshold=threshold, method=method, coupling=coupling)
    cancellation_rtol = float(val.check_positive(cancellation_rtol, "cancellation_rtol"))

    resolved = quantity.resolve(model)
    levels = list(resolved)
    weights = [resolved[n] for n in levels]
    try:
        exps = expansions(model, levels, order, settings=settings)
    except DegenerateLevelError as exc:
        raise DegenerateLevelError(f"quantity {quantity.name!r}: {exc}", exc.pair) from None

    notes: list[str] = []
    rows: list[np.ndarray | None] = []
    group_cache: dict[tuple[int, ...], list] = {}
    for n, e in zip(levels, exps):
        if e.energy_coefficients is not None:
            rows.append(np.asarray(e.energy_coefficients, dtype=float))
            continue
        notes.extend(getattr(getattr(e, "block", None), "notes", ()))
        c, note = _block_level_taylor(model, n, order, group_cache)
        rows.append(c)
        if note:
            notes.append(note)
    level_coefficients = np.full((len(levels), order + 1), np.nan)
    for i, c in enumerate(rows):
        if c is not None:
            level_coefficients[i] = c
    if all(c is not None for c in rows):
        coefficients = np.asarray(weights) @ level_coefficients
        nonzero = _nonzero_mask(model, levels, weights, level_coefficients, coefficients, cancellation_rtol)
        first = int(np.argmax(nonzero)) if nonzero.any() else None
    else:
        coefficients = None
        nonzero = None
        first = None
    unperturbed = float(sum(w * model.e0[n] for n, w in zip(levels, weights)))

    total_w = sum(weights)
    if abs(total_w) > 1e-12 * max(abs(w) for w in weights):
        notes.append(
            f"The weights of {quantity.name!r} add up to {total_w:g}, not 0: its value depends on the zero of energy of H0."
        )
    cf = _closed_form(model, quantity)
    closed_form = None if cf is None else (cf[0], cf[1])
    cf_order = None
    if cf is not None:
        cf_order = cf[2] if cf[2] is not None else first
        notes.append(f"Closed form {cf[0]} from {cf[3]}.")
    leading = _leading_text(quantity.name, coefficients, nonzero, order)
    return QuantitySeries(
        name=quantity.name,
        units=quantity.units,
        model_name=model.name,
        order=order,
        levels=tuple(levels),
        labels=tuple(model.label(n) for n in levels),
        weights=tuple(float(w) for w in weights),
        treatments=tuple(e.treatment for e in exps),
        coefficients=None if coefficients is None else _ro(coefficients),
        level_coefficients=_ro(level_coefficients),
        first_nonzero_order=first,
        leading_term=leading,
        closed_form=closed_form,
        closed_form_order=cf_order,
        relative_to=quantity.relative_to,
        unperturbed=unperturbed,
        notes=tuple(dict.fromkeys(notes)),
        quantity=quantity,
        _expansions=tuple(exps),
        reasons=tuple(e.reason for e in exps),
    )


def _leading_text(name: str, c: np.ndarray | None, nonzero: np.ndarray | None, order: int) -> str:
    if c is None or nonzero is None:
        return f"{name}: no scalar series (see notes)"
    ks = np.flatnonzero(nonzero)
    if ks.size == 0:
        return f"{name} = 0 to order {order} (every computed coefficient cancels)"
    first = int(ks[0])
    if first > 0:
        return f"{name} ≈ {c[first]:.6g}{_power(first)} (order {first})"
    if ks.size == 1:
        return f"{name} = {c[0]:.6g} (no correction to order {order})"
    nxt = int(ks[1])
    sign = "+" if c[nxt] >= 0 else "−"
    return f"{name} ≈ {c[0]:.6g} {sign} {abs(c[nxt]):.6g}{_power(nxt)} (first correction at order {nxt})"


def _natural_scales(model: Model, levels: list[int], order: int) -> np.ndarray:
    """(L, order + 1): ``s_k = ‖V‖ (‖V‖/gap_n)^(k−1)`` per level (``s_0`` = H0 scale)."""
    nv = model.norm_v
    e0 = model.e0
    h0_scale = float(max(np.max(np.abs(e0)), np.ptp(e0), np.finfo(float).tiny))
    out = np.zeros((len(levels), order + 1))
    for i, n in enumerate(levels):
        d = np.abs(e0 - e0[n])
        d = d[d > model.degeneracy_tol]
        gap = float(d.min()) if d.size else max(nv, np.finfo(float).tiny)
        out[i, 0] = h0_scale
        if order >= 1 and nv > 0:
            with np.errstate(over="ignore"):
                out[i, 1:] = nv * (nv / gap) ** np.arange(order)
    out[~np.isfinite(out)] = 0.0  # overflow: no floor (the relative test alone decides)
    return out


def _nonzero_mask(model, levels, weights, level_c, c, rtol) -> np.ndarray:
    """Boolean (order + 1,): which coefficients of the quantity survive cancellation."""
    w = np.abs(np.asarray(weights))
    contrib = w @ np.abs(level_c)
    floor = _NOISE_RTOL * (w @ _natural_scales(model, levels, level_c.shape[1] - 1))
    return np.abs(c) > rtol * contrib + floor


# ---------------------------------------------------------------------- block Taylor series
def _block_level_taylor(model: Model, level: int, order: int, cache: dict) -> tuple[np.ndarray | None, str]:
    """Taylor coefficients of the energy of a level in a near-degenerate block (or unresolved group), and a note."""
    grp = model.degenerate_group_of(level)
    if grp is None:
        s = rs_series(model, level, order)
        return np.asarray(s.energy_coefficients, dtype=float), (
            f"Level {model.label(level)} is in a near-degenerate block; its Taylor coefficients are its Rayleigh–Schrödinger "
            "coefficients, while energy() uses the block eigenvalue (they agree up to the truncation order)."
        )
    if grp not in cache:
        cache[grp] = _group_taylor(model, grp, order)
    c = cache[grp][grp.index(level)]
    if c is None:
        return None, (
            f"Level {model.label(level)} stays degenerate with other levels of its group "
            f"{[model.label(i) for i in grp]} at the order where the group splits; its Taylor series is not "
            "resolved here, so the quantity has no scalar series (coefficients=None). energy() still uses the "
            "block eigenvalues."
        )
    return c, (
        f"Level {model.label(level)} is exactly degenerate in H0; its Taylor coefficients come from the eigenvalue "
        "branch of its group's Schrieffer–Wolff effective Hamiltonian (ascending energy at small positive λ)."
    )


def _group_taylor(model: Model, grp: tuple[int, ...], order: int) -> list[np.ndarray | None]:
    """Taylor coefficients of each branch of an exactly degenerate group (good states at the splitting order)."""
    from .blocks import block_series  # lazy, as in treatment.py

    bs = block_series(model, list(grp), order, method="schrieffer-wolff")
    h = np.asarray(bs.coefficients)  # (order + 1, d, d)
    e0 = float(np.mean(np.real(np.diag(h[0]))))
    if order == 0:
        return [np.array([e0]) for _ in grp]
    branches = group_branches(h, natural_scales(model.norm_v, bs.gap, order))
    return [None if b.coefficients is None else np.concatenate([[e0], b.coefficients]) for b in branches]


# ====================================================================== convergence helper
def quantity_radius(
    model: Model,
    quantity: Quantity,
    radius_of_level: Callable[[int], float],
) -> tuple[float, int]:
    """Convergence radius of a quantity's series from its levels' radii.

    Parameters
    ----------
    model : Model
    quantity : Quantity
    radius_of_level : callable
        ``radius_of_level(level) -> float``: radius of convergence (in λ,
        >= 0, ``inf`` allowed, NaN = unknown) of the series of one level,
        given its work-basis index.

    Returns
    -------
    radius : float
        The smallest radius among the levels the quantity uses (NaN if a
        level's radius is unknown).
    limiting_level : int
        Work-basis index of the level that sets it (the first one with an
        unknown radius, if any).

    Notes
    -----
    This is a lower bound: singularities of different levels can cancel in
    the combination (e.g. ``E_10 + E_01`` of two exchange-coupled two-level
    qubits is analytic everywhere).  A radius estimated from
    :attr:`QuantitySeries.coefficients` can therefore be larger.

    Examples
    --------
    >>> from ptcheck.models import jaynes_cummings
    >>> m = jaynes_cummings(n_photons=4)
    >>> quantity_radius(m, dispersive_shift(), lambda n: 10.0 - n)
    (7.0, 3)
    """
    _check_model_quantity(model, quantity)
    if not callable(radius_of_level):
        raise TypeError(f"radius_of_level must be a callable level -> radius; got {radius_of_level!r}")
    best_r, best_n = math.inf, None
    for n in quantity.resolve(model):
        raw = radius_of_level(n)
        try:
            r = float(raw)
        except (TypeError, ValueError):
            raise TypeError(
                f"radius_of_level({n}) for quantity {quantity.name!r} must return a number; got {raw!r}"
            ) from None
        if math.isnan(r):
            return math.nan, n
        if r < 0:
            raise ValueError(f"radius_of_level({n}) for quantity {quantity.name!r} returned a negative radius {r!r}")
        if best_n is None or r < best_r:
            best_r, best_n = r, n
    assert best_n is not None  # resolve() never returns an empty mapping
    return best_r, best_n
