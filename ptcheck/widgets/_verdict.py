"""The verdict banner: is each order valid at the current coupling, and up to where (private).

Built from validity boundaries already computed (no engine work), so it follows
the coupling live.  An order is valid at λ when |λ| lies below its boundary
|λ*| on the side of λ (the boundary is where the error first exceeds the
tolerance going out from λ = 0).

With certified bounds (no exact solve) each order at each tolerance is what
``ValidityBoundary.decision_at(λ)`` decides: "certified valid up to …"
(rigorous, or conditional on an estimated gap), "certified NOT valid from …",
or "undecided between … and …".  Certified couplings are printed rounded
toward safety (the certified coupling down, the coupling of certified
failure up).
"""

from __future__ import annotations

import html
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from .._format import fmt_certified_range, fmt_toward
from ..approximants import order_name
from ._text import fmt_coupling, fmt_number, fmt_tol, physical_coupling

__all__ = ["OrderVerdict", "Verdict", "verdict", "verdict_html"]

GOOD, PARTIAL, BAD, UNKNOWN = "#009E73", "#B77A00", "#D55E00", "#666666"  # Okabe–Ito green/orange(darkened)/vermillion


@dataclass(frozen=True)
class OrderVerdict:
    """One order: its reach and whether it is valid at the current coupling, per tolerance.

    Attributes
    ----------
    order : str
        Order name (``"order 2"``).
    reach : tuple of float
        Per tolerance: |λ*| on the side of the current coupling; ``inf`` when the
        order meets the tolerance over the whole range checked, 0 when it fails
        at any λ ≠ 0, NaN when the boundary is undefined.
    meets : tuple of bool or None
        Per tolerance: valid at the current coupling (None: undefined, or
        undecided by certified bounds).
    text : str
        The sentence shown.
    certified : tuple of str
        Per tolerance, with certified bounds: what the certified boundary
        decides at the current coupling (``decision_at``: "valid", "not valid"
        or "undecided"; "" without a certified boundary); empty with exact
        solves only.  With certified bounds only, ``reach`` is the certified
        coupling |λ| (``inf``: certified over the whole range).
    """

    order: str
    reach: tuple
    meets: tuple
    text: str
    certified: tuple = ()

    @property
    def mark(self) -> str:
        known = [m for m in self.meets if m is not None]
        if not known:
            return "?"
        if all(known) and len(known) == len(self.meets):
            return "✓"
        return "◐" if any(known) else "✗"


@dataclass(frozen=True)
class Verdict:
    """The banner's content: target, coupling, tolerances and one :class:`OrderVerdict` per order.

    Attributes
    ----------
    target : str
    coupling : float
        The coupling λ the verdict is for.
    tols : tuple of float
        Tolerances (fractions of the reference when ``relative``, else energy units).
    relative : bool
    orders : tuple of OrderVerdict
    """

    target: str
    coupling: float
    tols: tuple
    relative: bool
    orders: tuple

    def to_dict(self) -> dict:
        def num(x: float) -> float | str | None:
            return x if math.isfinite(x) else (None if math.isnan(x) else str(x))

        return {"target": self.target, "coupling": self.coupling, "tolerances": list(self.tols),
                "tolerance_kind": "relative" if self.relative else "absolute",
                "orders": [{"order": o.order, "reach": [num(r) for r in o.reach], "valid_here": list(o.meets),
                            "certified_here": list(o.certified), "text": o.text} for o in self.orders]}

    def __repr__(self) -> str:
        marks = ", ".join(f"{o.order} {o.mark}" for o in self.orders)
        return f"Verdict({self.target} at λ = {self.coupling:.4g}: {marks})"

    def _repr_html_(self) -> str:
        return verdict_html(self, heading=f"Verdict for {self.target}")


def verdict(
    boundaries: Sequence[Any],
    *,
    target: str,
    orders: Sequence[Any],
    tols: Sequence[float],
    relative: bool,
    coupling: float,
    model: Any = None,
    unit: str = "energy units",
    errors_at: dict | None = None,
    undefined: Sequence[str] = (),
    unavailable: dict | None = None,
    reference: str = "exact",
    uncertified: dict | None = None,
) -> Verdict:
    """Verdict per order from validity boundaries (see module docstring).

    Parameters
    ----------
    boundaries : sequence of ValidityBoundary
        For ``target``: one per order × tolerance × direction searched.
    orders : sequence of order specs
    tols : sequence of float
        Tolerances (fractions when ``relative``).
    coupling : float
        Current coupling λ.
    model : Model, optional
        For the physical coupling (``coupling_scale``/``coupling_unit``).
    errors_at : dict, optional
        ``order name -> error at λ`` (same kind as ``tols``): when the error is
        back below a tolerance beyond the boundary, the sentence says so.
    undefined : sequence of str
        Order names whose relative error is undefined over the whole sweep (the
        exact reference is ≈ 0 everywhere): no verdict is given for them.
    unavailable : dict, optional
        ``order name -> reason`` for orders without boundaries (no verdict).
    reference : {"exact", "bounds", "both"}
        Which boundaries judge: exact ones (``b.reference == "exact"``),
        certified ones (``"bounds"``), or exact ones with the certified
        verdict added to each sentence (``"both"``).
    uncertified : dict, optional
        With ``"both"``: ``order name -> reason`` for orders without a
        certified boundary.
    """
    lam = float(coupling)
    side = 1 if lam >= 0 else -1
    exact_b = [b for b in boundaries if getattr(b, "reference", "exact") == "exact"]
    cert_b = [b for b in boundaries if getattr(b, "reference", "exact") == "bounds"]
    lines = []
    for spec in orders:
        name = order_name(spec)
        if reference == "bounds":
            lines.append(_certified_order(cert_b, spec, name, target=target, tols=tols, relative=relative, lam=lam,
                                          model=model, unit=unit, unavailable=unavailable or {}))
            continue
        if name in (unavailable or {}):
            lines.append(OrderVerdict(order=name, reach=(math.nan,) * len(tols), meets=(None,) * len(tols),
                                      text=f"{name}: {unavailable[name]}."))
            continue
        if name in undefined:
            text = (f"{name}: no verdict — the relative error is undefined because the exact reference of {target} "
                    "is ≈ 0 over the whole range (it does not move); use an absolute tolerance.")
            lines.append(OrderVerdict(order=name, reach=(math.nan,) * len(tols), meets=(None,) * len(tols), text=text))
            continue
        picked = [_pick(exact_b, spec, tol, relative, side) for tol in tols]
        if picked and all(b is not None and b.status == "exact_in_sector" for b in picked):
            text = (f"{name}: no verdict — with this treatment {target} is exact within its sector (its block is a "
                    "whole invariant sector: exact diagonalisation, not a perturbative order).")
            lines.append(OrderVerdict(order=name, reach=(math.nan,) * len(tols), meets=(None,) * len(tols), text=text))
            continue
        reach, meets, clauses = [], [], []
        for tol, b in zip(tols, picked):
            r, m, clause = _one(b, lam, tol, relative, model, unit)
            reach.append(r)
            meets.append(m)
            clauses.append(clause)
        text = name + " " + _join(clauses) + _at(lam, tols, meets, reach, relative, model, unit)
        err = (errors_at or {}).get(name)
        if err is not None and math.isfinite(err):
            back = [fmt_tol(t, relative, unit) for t, m in zip(tols, meets) if m is False and err <= t]
            if back and lam != 0:
                text += f" (Its error is back below {' and '.join(back)} here: a cancellation, not a range of validity.)"
        certified: tuple = ()
        if reference == "both":
            if name in (uncertified or {}):
                text += f" Bounds: {uncertified[name]}."
            else:
                cv = _certified_order(cert_b, spec, name, target=target, tols=tols, relative=relative, lam=lam,
                                      model=model, unit=unit, unavailable={})
                text += " Bounds: " + cv.text.split(": ", 1)[1] if len(tols) == 1 else " Bounds:" + cv.text[len(name):]
                certified = cv.certified
        lines.append(OrderVerdict(order=name, reach=tuple(reach), meets=tuple(meets), text=text, certified=certified))
    return Verdict(target=str(target), coupling=lam, tols=tuple(tols), relative=bool(relative), orders=tuple(lines))


def _pick(boundaries: Sequence[Any], spec: Any, tol: float, relative: bool, side: int) -> Any:
    found = [b for b in boundaries if b.order == spec and (b.rtol if relative else b.tol) == tol]
    same_side = [b for b in found if b.direction == side]
    return (same_side or found or [None])[0]


def _one(b: Any, lam: float, tol: float, relative: bool, model: Any, unit: str) -> tuple[float, bool | None, tuple]:
    """(reach, valid at λ, clause) for one tolerance; a clause is (verb, tolerance, where)."""
    t = fmt_tol(tol, relative, unit)
    if b is None:
        return math.nan, None, ("has", f"no boundary for {t}", "")
    if b.status == "found":
        reach = abs(float(b.coupling))
        way = "up to" if b.coupling > 0 else "down to"
        return reach, abs(lam) < reach, ("meets", t, f"{way} {fmt_coupling(b.coupling, model, symbol='λ*')}")
    if b.status == "not_reached":
        top = float(b.max_coupling)
        return math.inf, abs(lam) <= top * (1 + 1e-12), ("meets", t, f"over the whole range checked (|λ| ≤ {fmt_number(top, 3)})")
    if b.status == "fails_at_zero":
        return 0.0, lam == 0, ("misses", t, "at every λ ≠ 0")
    if b.status == "ill_defined":
        return math.nan, None, ("has", f"no defined relative error for {t}",
                                "(the exact shift passes through 0; use an absolute tolerance)")
    return math.nan, None, ("has", f"no verdict for {t}", f"({b.status.replace('_', ' ')})")


def _join(clauses: Sequence[tuple]) -> str:
    """``meets 1 % and 5 % over the whole range`` / ``meets 1 % up to λ* = 0.8 and 5 % up to λ* = 1.2``."""
    groups: list[list] = []
    for verb, tol, where in clauses:
        if groups and groups[-1][0] == verb and groups[-1][2] == where:
            groups[-1][1].append(tol)
        else:
            groups.append([verb, [tol], where])
    out, prev = [], None
    for verb, tols, where in groups:
        body = _and(tols) + (f" {where}" if where else "")
        out.append(body if verb == prev else f"{verb} {body}")
        prev = verb
    return " and ".join(out)


def _and(tols: Sequence[str]) -> str:
    """``0.0001 and 0.001 energy units`` (one unit word for several absolute tolerances); ``1 % and 5 %``."""
    units = {t.split(" ", 1)[1] for t in tols if " " in t}
    if len(tols) > 1 and len(units) == 1 and all(" " in t for t in tols) and units != {"%"}:
        (unit,) = units
        return " and ".join(t.split(" ", 1)[0] for t in tols) + f" {unit}"
    return " and ".join(tols)


def _at(lam: float, tols: Sequence[float], meets: Sequence, reach: Sequence, relative: bool, model: Any, unit: str) -> str:
    where = fmt_coupling(lam, model, digits=4)
    if lam == 0:
        return f"; at {where} it is exact (no perturbation)."
    if all(r == 0 for r in reach):
        return "."
    if any(m is None for m in meets):
        known = [(t, m) for t, m in zip(tols, meets) if m is not None]
        if not known:
            return "."
    else:
        known = list(zip(tols, meets))
    if len(known) == 1:
        return f"; at {where} it {'does' if known[0][1] else 'does not'}."
    ok = [fmt_tol(t, relative, unit) for t, m in known if m]
    bad = [fmt_tol(t, relative, unit) for t, m in known if not m]
    if not bad:
        return f"; at {where} it meets {'both' if len(known) == 2 else 'all of them'}."
    if not ok:
        return f"; at {where} it meets {'neither' if len(known) == 2 else 'none of them'}."
    return f"; at {where} it meets {', '.join(ok)}, not {', '.join(bad)}."


def verdict_html(v: Verdict, *, heading: str, stale: bool = False) -> str:
    """The banner: a heading line (target, what the tolerance is relative to) and one line per order."""
    colours = {"✓": GOOD, "◐": PARTIAL, "✗": BAD, "?": UNKNOWN}
    rows = "".join(
        f"<div style='margin:2px 0'><span style='color:{colours[o.mark]};font-weight:bold;display:inline-block;"
        f"width:1.3em'>{o.mark}</span>{html.escape(o.text)}</div>"
        for o in v.orders
    )
    best = [o.mark for o in v.orders]
    edge = GOOD if "✓" in best else PARTIAL if "◐" in best else BAD if "✗" in best else UNKNOWN
    if stale:
        edge = UNKNOWN
    note = ("<div style='color:#8A5A00'><b>Previous request:</b> this verdict belongs to the figure below, "
            "not to the current controls (see the message).</div>") if stale else ""
    return (
        f"<div class='ptcheck-verdict' style='border-left:6px solid {edge};background:#F7F7F7;padding:6px 12px;"
        f"font-size:15px;line-height:1.45'>{note}<div style='color:#444;font-size:13px'>{html.escape(heading)}</div>"
        f"{rows}</div>"
    )


# ---------------------------------------------------------------------- certified bounds
def _certified_order(boundaries: Sequence[Any], spec: Any, name: str, *, target: str, tols: Sequence[float],
                     relative: bool, lam: float, model: Any, unit: str, unavailable: dict) -> OrderVerdict:
    """One order judged by certified boundaries: per tolerance, what ``decision_at(λ)`` decides, in words."""
    n = len(tols)
    if name in unavailable:
        return OrderVerdict(order=name, reach=(math.nan,) * n, meets=(None,) * n, text=f"{name}: {unavailable[name]}.",
                            certified=("",) * n)
    side = 1 if lam >= 0 else -1
    picked = [_pick(boundaries, spec, tol, relative, side) for tol in tols]
    if picked and all(b is not None and b.status == "exact_in_sector" for b in picked):
        text = (f"{name}: no verdict — with this treatment {target} is exact within its sector (its block is a "
                "whole invariant sector: exact diagonalisation, not a perturbative order).")
        return OrderVerdict(order=name, reach=(math.nan,) * n, meets=(None,) * n, text=text, certified=("undecided",) * n)
    reach, meets, decisions, groups = [], [], [], {}
    for tol, b in zip(tols, picked):
        t = fmt_tol(tol, relative, unit)
        if b is None:
            reach.append(math.nan)
            meets.append(None)
            decisions.append("")
            groups.setdefault("no certified boundary", []).append(t)
            continue
        d = b.decision_at(lam)
        decisions.append(d)
        meets.append(True if d == "valid" else False if d == "not valid" else None)
        reach.append(_certified_reach(b))
        groups.setdefault(_certified_phrase(b, d, lam, model), []).append(t)
    # tolerances with the same phrase share it: "order 4 at 1 % and 5 %: certified valid over the whole range ..."
    text = name + " " + "; ".join(f"at {_and(ts)}: {phrase}" for phrase, ts in groups.items()) + "."
    return OrderVerdict(order=name, reach=tuple(reach), meets=tuple(meets), text=text, certified=tuple(decisions))


def _certified_reach(b: Any) -> float:
    if b.status in ("certified", "not_certified"):
        return abs(float(b.coupling))
    if b.status == "not_reached":
        return math.inf
    if b.status == "fails_at_zero":
        return 0.0
    return math.nan


def _lam(value: float, model: Any, *, up: bool = False, symbol: str = "λ") -> str:
    """``λ = 1.101 (g = 72.6 MHz)``: a certified coupling printed rounded toward safety (``up``: away from 0)."""
    text = f"{symbol} = {fmt_toward(value, up=up)}"
    phys = physical_coupling(model)
    if phys is not None:
        scale, unit = phys
        text += f" (g = {fmt_toward(value * scale, up=up)}" + (f" {unit})" if unit else ")")
    return text


def _range(low: float, high: float, model: Any, side: int) -> str:
    """``λ = 1.101 and 1.103``: the low end rounded down, the high end up (physical values beside)."""
    a, b = fmt_certified_range(abs(low), abs(high))
    sign = "−" if side < 0 else ""
    text = f"λ = {sign}{a} and {sign}{b}"
    phys = physical_coupling(model)
    if phys is not None:
        scale, unit = phys
        pa, pb = fmt_certified_range(abs(low * scale), abs(high * scale))
        u = f" {unit}" if unit else ""
        text += f" (g = {sign}{pa}{u} and {sign}{pb}{u})"
    return text


def _gap_words(rigorous: bool, b: Any) -> str:
    if rigorous:
        return "rigorous"
    if str(b.gap_kind).startswith("given"):
        return "conditional on the gap given"
    return "conditional on an estimated gap"


def _certified_phrase(b: Any, decision: str, lam: float, model: Any) -> str:
    """What a certified boundary says at λ: certified valid up to …, certified NOT valid from …, undecided between …."""
    c, f = float(b.coupling), float(b.certified_not)
    side = b.direction
    if b.status == "fails_at_zero":
        return "certified NOT valid at any λ ≠ 0"
    if b.status not in ("certified", "not_certified", "not_reached"):
        return f"no certified verdict ({b.status.replace('_', ' ')})"
    if decision == "valid":
        rig = b.rigorous or abs(lam) < abs(b.rigorous_coupling)
        kind = _gap_words(rig, b)
        if not b.rigorous and rig and math.isfinite(b.rigorous_coupling) and b.rigorous_coupling != 0:
            kind += f" here; beyond {_lam(b.rigorous_coupling, model)} conditional on an estimated gap"
        if b.status == "not_reached":
            return f"certified valid over the whole range checked (|λ| ≤ {fmt_number(b.max_coupling, 3)}) ({kind})"
        return f"certified valid up to {_lam(c, model)} ({kind})"
    if decision == "not valid":
        kind = _gap_words(b.certified_not_rigorous, b)
        if c == 0:
            return f"certified NOT valid from {_lam(f, model, up=True)} ({kind})"
        a, z = fmt_certified_range(abs(c), abs(f))
        sign = "−" if side < 0 else ""
        return f"certified NOT valid from λ = {sign}{z} ({kind}; certified valid up to {sign}{a})"
    # undecided
    if math.isfinite(f):
        if c == 0:
            return (f"undecided below {_lam(f, model, up=True)} (nothing certified there; certified NOT valid from "
                    f"there, {_gap_words(b.certified_not_rigorous, b)})")
        return f"undecided between {_range(c, f, model, side)} (certified valid below the first, NOT valid from the second)"
    if c == 0:
        return "undecided (nothing certified: the bounds are too wide here; compare with exact solves)"
    return (f"undecided beyond {_lam(c, model)} (certified valid up to there; no failure certified within "
            f"|λ| ≤ {fmt_number(b.max_coupling, 3)})")
