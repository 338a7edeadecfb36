"""Words and numbers the panels show: couplings with their physical value, tolerances with units,
errors with enough digits, errors as plain sentences (private; no widgets here).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..quantities import Quantity

__all__ = [
    "physical_coupling",
    "fmt_coupling",
    "fmt_number",
    "fmt_input",
    "parse_number",
    "energy_unit",
    "fmt_tol",
    "fmt_error",
    "relative_to_text",
    "sentence",
    "panel_words",
]


def physical_coupling(model: Any) -> tuple[float, str] | None:
    """``(scale, unit)`` when the model states what λ = 1 means physically (``coupling_scale``/``coupling_unit``)."""
    scale = getattr(model, "coupling_scale", None)
    unit = getattr(model, "coupling_unit", None)
    if scale is None:
        return None
    try:
        scale = float(scale)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(scale):
        return None
    return scale, str(unit or "")


def fmt_number(x: float, digits: int = 4, *, keep_zeros: bool = False) -> str:
    """``x`` to ``digits`` significant digits, positional for ordinary sizes.

    Trailing zeros are dropped (``0.8``) unless ``keep_zeros`` (``−0.0100000``:
    a column of values that all show their precision).
    """
    if x is None or not math.isfinite(x):
        return "∞" if x == math.inf else "−∞" if x == -math.inf else "—"
    if x == 0:
        return "0"
    if 1e-4 <= abs(x) < 1e6:
        return np.format_float_positional(float(x), precision=digits, unique=False, fractional=False,
                                          trim="k" if keep_zeros else "-").replace("-", "−")
    return (f"{x:#.{digits}g}" if keep_zeros else f"{x:.{digits}g}").replace("-", "−")


def fmt_input(x: float, digits: int = 4) -> str:
    """A number for an input box: like :func:`fmt_number` but with an ASCII minus (editable, parseable)."""
    return fmt_number(x, digits).replace("−", "-")


def parse_number(text: str) -> float:
    """A typed number (accepts the typographic minus); ValueError when it is not one."""
    return float(str(text).strip().replace("−", "-"))


def fmt_coupling(lam: float, model: Any, *, symbol: str = "λ", digits: int = 3) -> str:
    """``"λ = 0.8 (g = 66 MHz)"``; the physical value only when the model has one."""
    text = f"{symbol} = {fmt_number(lam, digits)}"
    phys = physical_coupling(model)
    if phys is not None:
        text += f" ({fmt_physical(lam, phys, digits)})"
    return text


def fmt_physical(lam: float, phys: tuple[float, str], digits: int = 3) -> str:
    """``"g = 66 MHz"``: the physical coupling at λ (the symbol from ``model.coupling_symbol``, default g)."""
    scale, unit = phys
    return f"g = {fmt_number(lam * scale, digits)}" + (f" {unit}" if unit else "")


def energy_unit(model: Any) -> str:
    """The model's energy unit when it names one, else ``"energy units"`` (the units of H0)."""
    for attr in ("energy_unit", "units"):
        u = getattr(model, attr, None)
        if isinstance(u, str) and u:
            return u
    return "energy units"


def fmt_tol(tol: float, relative: bool, unit: str = "energy units") -> str:
    """``"1 %"`` (relative, given as a fraction) or ``"0.001 energy units"`` (absolute)."""
    if relative:
        return f"{fmt_number(100.0 * tol, 3)} %"
    return f"{fmt_number(tol, 3)} {unit}"


def fmt_error(err: float, tols: Any, relative: bool) -> str:
    """An error with enough digits that it never reads equal to a tolerance it differs from.

    Relative errors (fractions) are shown in percent.
    """
    if err is None or not math.isfinite(err):
        return "—"
    factor = 100.0 if relative else 1.0
    e = err * factor
    ts = [t * factor for t in tols]
    digits = 2
    while digits < 8 and any(t != e and _fmt_plain(t, digits) == _fmt_plain(e, digits) for t in ts):
        digits += 1
    return _fmt_plain(e, digits) + (" %" if relative else "")


def _fmt_plain(x: float, digits: int) -> str:
    """``digits`` significant digits; positional for 1e-3 <= |x| < 1e4 (``100``, not ``1e+02``)."""
    if x == 0:
        return "0"
    if 1e-3 <= abs(x) < 1e4:
        s = np.format_float_positional(x, precision=digits, unique=False, fractional=False, trim="-")
    else:
        s = f"{x:.{digits - 1}e}"
    return s.replace("-", "−")


def relative_to_text(target: Any) -> str:
    """What a relative error of this target is relative to (level: its exact shift)."""
    if isinstance(target, Quantity):
        if target.relative_to == "shift":
            return f"the exact change of {target.name} from λ = 0"
        return f"the exact value of {target.name}"
    return "the exact shift E(λ) − E(0)"


def sentence(exc: BaseException) -> str:
    """An exception message as a plain sentence: capital first letter, final full stop."""
    text = str(exc).strip() or type(exc).__name__
    if isinstance(exc, KeyError) and len(exc.args) == 1:
        text = f"unknown key {exc.args[0]!r}"
    first = text.split(" ", 1)[0]
    if first.isalpha() and first.islower():  # a word, not a name like jaynes_cummings or n_photons
        text = text[0].upper() + text[1:]
    if text[-1] not in ".!?":
        text += "."
    return text


#: Engine phrases about the reference, as the panel's controls say them.
_PANEL_WORDS = (
    ("compare(..., reference='bounds') still brackets it at given couplings", "the figures still show its brackets"),
    ("reference='bounds' brackets", "certified bounds bracket"),
    ("reference='bounds' certifies", "certified bounds certify"),
    ("reference='bounds'", "certified bounds"),
    ("Use reference='exact'", "Choose the reference 'exact' or 'both'"),
    ("reference='exact'", "the reference 'exact'"),
)


def panel_words(text: str) -> str:
    """An engine message about the reference worded as the panel's controls say it (no Python call syntax)."""
    for old, new in _PANEL_WORDS:
        text = text.replace(old, new)
    return text
