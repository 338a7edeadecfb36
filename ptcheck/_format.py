"""How numbers read in reports and figures: complex couplings, order specs in JSON.

Private module shared by the report writers, the figures and the engine's
plain-words summaries, so a complex coupling reads the same everywhere.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = ["fmt_complex", "clean_complex", "order_json", "order_from_json", "order_from_name"]


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
