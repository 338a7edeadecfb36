"""What a "perturbative order" can be: a truncation order or a Padé approximant.

``compare`` and ``validity_boundary`` accept a list of *order specs*.  An int
``k`` means "the series truncated after the λ^k term"; a :class:`Pade` means
the Padé approximant [L/M] built from the same coefficients.  Strings are
accepted where people type them (command line, widgets): ``"3"``,
``"pade3/3"`` or ``"pade3/3@2"`` (Padé in λ², see :class:`Pade`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Union

from . import _validation as val

__all__ = ["Pade", "OrderSpec", "parse_order", "parse_orders", "order_name", "required_order"]


@dataclass(frozen=True)
class Pade:
    """Padé approximant [L/M] of an energy series.

    Parameters
    ----------
    num : int
        Degree L of the numerator.
    den : int
        Degree M of the denominator.
    in_square : bool, default False
        Build the approximant in the variable λ² (for series with only even
        powers beyond the constant, e.g. a two-level system with off-diagonal
        V).  It then needs coefficients up to order ``2 (L + M)``.
    """

    num: int
    den: int
    in_square: bool = False

    def __post_init__(self) -> None:
        val.check_int(self.num, "Pade numerator degree", minimum=0)
        val.check_int(self.den, "Pade denominator degree", minimum=0)

    @property
    def order(self) -> int:
        """Highest series order the approximant uses."""
        k = self.num + self.den
        return 2 * k if self.in_square else k

    def __str__(self) -> str:
        return f"Padé[{self.num}/{self.den}]" + ("(λ²)" if self.in_square else "")


OrderSpec = Union[int, Pade]

_PADE_RE = re.compile(r"^\s*(?:pad[eé])\s*\[?\s*(\d+)\s*/\s*(\d+)\s*\]?\s*(@\s*2|\(λ²\))?\s*$", re.IGNORECASE)


def parse_order(spec: Any) -> OrderSpec:
    """Normalise one order spec (int, :class:`Pade` or string) or raise ``ValueError``.

    Orders above :data:`ptcheck._validation.MAX_ORDER` (1000) are refused, also
    when a Padé approximant would need them.
    """
    out = _parse_order(spec)
    if isinstance(out, Pade) and out.order > val.MAX_ORDER:
        raise ValueError(f"{out} needs the series to order {out.order}, beyond the limit of {val.MAX_ORDER} orders")
    return val.check_order(out) if not isinstance(out, Pade) else out


def _parse_order(spec: Any) -> OrderSpec:
    if isinstance(spec, Pade):
        return spec
    if isinstance(spec, str):
        s = spec.strip()
        if s.isdigit():
            return int(s)
        m = _PADE_RE.match(s)
        if m:
            return Pade(int(m.group(1)), int(m.group(2)), in_square=m.group(3) is not None)
        raise ValueError(
            f"order must be an int >= 0, a Pade(L, M) or a string like '3', 'pade3/3' or 'pade2/2@2'; got {spec!r}"
        )
    return val.check_int(spec, "order", minimum=0)


def parse_orders(specs: Any) -> tuple[OrderSpec, ...]:
    """Normalise a spec or a sequence of specs into a non-empty tuple."""
    if isinstance(specs, (int, str, Pade)):
        specs = [specs]
    out = tuple(parse_order(s) for s in specs)
    if not out:
        raise ValueError("orders is empty; give at least one order")
    return out


def order_name(spec: OrderSpec) -> str:
    """Printable name: ``"order 3"`` or ``"Padé[2/2]"``."""
    return str(spec) if isinstance(spec, Pade) else f"order {spec}"


def required_order(spec: OrderSpec) -> int:
    """Highest coefficient order a spec needs."""
    return spec.order if isinstance(spec, Pade) else int(spec)
