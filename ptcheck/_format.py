"""How numbers read in reports and figures: complex couplings, order specs in JSON.

Private module shared by the report writers, the figures and the engine's
plain-words summaries, so a complex coupling reads the same everywhere.
"""

from __future__ import annotations

import math
from decimal import ROUND_CEILING, ROUND_DOWN, ROUND_FLOOR, ROUND_UP, Decimal
from typing import Any

__all__ = ["fmt_complex", "clean_complex", "order_json", "order_from_json", "order_from_name", "fmt_toward",
           "fmt_certified_range", "fmt_interval"]


def clean_complex(z: complex, *, rel: float = 1e-9) -> complex:
    """``z`` with a real or imaginary part below ``rel·|z|`` set to zero (round-off of a solver).

    Examples
    --------
    >>> clean_complex(complex(-4.2e-23, 7.35))
    7.35j
    """
    z = complex(z)
    size = abs(z)
    if not math.isfinite(size) or size == 0:
        return z
    re = 0.0 if abs(z.real) <= rel * size else z.real
    im = 0.0 if abs(z.imag) <= rel * size else z.imag
    return complex(re, im)


def fmt_complex(z: complex, digits: int = 3) -> str:
    """A complex number as people write it: ``"7.35i"``, ``"−7.35i"``, ``"1.2 + 7.35i"``, ``"0.5"``.

    Parts below ``1e-9·|z|`` (round-off) are dropped; ``digits`` significant
    digits per part.

    Examples
    --------
    >>> fmt_complex(complex(-4.2e-23, 7.35)), fmt_complex(complex(1.2, -7.35)), fmt_complex(0.5)
    ('7.35i', '1.2 − 7.35i', '0.5')
    """
    z = clean_complex(z)
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        return str(z)

    def num(x: float) -> str:
        return f"{x:.{digits}g}".replace("-", "−")

    if z.imag == 0:
        return num(z.real)
    im = f"{abs(z.imag):.{digits}g}i"
    if z.real == 0:
        return ("−" if z.imag < 0 else "") + im
    return f"{num(z.real)} {'−' if z.imag < 0 else '+'} {im}"


def order_json(spec: Any) -> Any:
    """An order spec for JSON: the int ``k``, or ``{"pade": [L, M]}`` (plus ``"in_square": true`` for λ²).

    Examples
    --------
    >>> from ptcheck.approximants import Pade
    >>> order_json(2), order_json(Pade(2, 1)), order_json(Pade(1, 1, in_square=True))
    (2, {'pade': [2, 1]}, {'pade': [1, 1], 'in_square': True})
    """
    from .approximants import Pade, parse_order

    spec = parse_order(spec)
    if isinstance(spec, Pade):
        d: dict[str, Any] = {"pade": [int(spec.num), int(spec.den)]}
        if spec.in_square:
            d["in_square"] = True
        return d
    return int(spec)


def order_from_json(x: Any) -> Any:
    """Inverse of :func:`order_json`.

    Examples
    --------
    >>> order_from_json({"pade": [2, 1]})
    Pade(num=2, den=1, in_square=False)
    """
    from .approximants import Pade, parse_order

    if isinstance(x, dict) and "pade" in x:
        num, den = x["pade"]
        return Pade(int(num), int(den), in_square=bool(x.get("in_square", False)))
    return parse_order(x)


def order_from_name(order: Any) -> Any:
    """An order spec from a spec or its printable name (``"order 2"``, ``"Padé[2/2]"``, ``"Padé[1/1](λ²)"``).

    Examples
    --------
    >>> order_from_name("order 3"), order_from_name("Padé[2/1]")
    (3, Pade(num=2, den=1, in_square=False))
    """
    from .approximants import parse_order

    if isinstance(order, str):
        name = order.strip()
        if name.startswith("order "):
            name = name[len("order "):]
        if name.startswith(("Padé[", "Pade[")):
            name = "pade" + name[5:].replace("]", "").replace("(λ²)", "@2")
        return parse_order(name)
    return parse_order(order)


def fmt_toward(x: float, digits: int = 3, *, up: bool = False) -> str:
    """``x`` to ``digits`` significant digits rounded toward zero (``up``: away from zero).

    A certified coupling must stay certified once printed: the end of a range
    where an order is certified to hold is rounded down in size, the coupling
    from which failure is certified is rounded up.

    Examples
    --------
    >>> fmt_toward(1.0996), fmt_toward(1.0996, up=True), fmt_toward(-0.29), fmt_toward(2.0071e-5)
    ('1.09', '1.1', '−0.29', '2e−05')
    """
    return _directed(x, digits, ROUND_UP if up else ROUND_DOWN)


def _directed(x: float, digits: int, rounding: str) -> str:
    """``x`` to ``digits`` significant digits with a :mod:`decimal` rounding mode."""
    x = float(x)
    if not math.isfinite(x):
        return "∞" if x > 0 else "−∞" if x < 0 else "nan"
    if x == 0:
        return "0"
    d = Decimal(repr(x))
    exp = d.adjusted() - (digits - 1)
    q = d.quantize(Decimal(1).scaleb(exp), rounding=rounding)
    if q == 0:  # cannot happen for digits >= 1; kept for safety
        return "0"
    e = q.adjusted()
    if -3 <= e < 5:
        text = _strip(format(q, "f"))
    else:
        text = f"{_strip(format(q.scaleb(-e), 'f'))}e{e:+03d}"
    return text.replace("-", "−")


def _strip(text: str) -> str:
    return text.rstrip("0").rstrip(".") if "." in text else text


def fmt_certified_range(low: float, high: float, digits: int = 3) -> tuple[str, str]:
    """``low`` rounded toward zero and ``high`` away from it: a printed range that contains the certified one.

    Digits are added (up to 6) until the printed range is at most three times
    as wide as the true one.

    Examples
    --------
    >>> fmt_certified_range(1.10193, 1.10279), fmt_certified_range(0.5, 0.8)
    (('1.101', '1.103'), ('0.5', '0.8'))
    """
    return _widen(low, high, digits, 6, lambda x, d: fmt_toward(x, d), lambda x, d: fmt_toward(x, d, up=True))


def fmt_interval(low: float, high: float, digits: int = 3, max_digits: int = 6) -> tuple[str, str]:
    """A certified interval [low, high] printed so that it still contains the true one (floor, ceiling).

    Digits are added (up to ``max_digits``) until the printed interval is at
    most three times as wide as the true one.

    Examples
    --------
    >>> fmt_interval(-0.0220946, -0.0220941), fmt_interval(0.0179, 0.0181, 2)
    (('−0.022095', '−0.022094'), ('0.0179', '0.0181'))
    """
    return _widen(low, high, digits, max_digits, lambda x, d: _directed(x, d, ROUND_FLOOR),
                  lambda x, d: _directed(x, d, ROUND_CEILING))


def _widen(low: float, high: float, digits: int, max_digits: int, down: Any, up: Any) -> tuple[str, str]:
    width = abs(float(high) - float(low))
    for d in range(digits, max(digits, max_digits) + 1):
        a, b = down(low, d), up(high, d)
        if "∞" in a + b or "nan" in a + b:
            break
        if abs(float(b.replace("−", "-")) - float(a.replace("−", "-"))) <= 3.0 * width:
            break
    return a, b
