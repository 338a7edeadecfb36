"""Joint validity regions of two couplings: where an order meets a tolerance in the (λ₁, λ₂) plane.

Along a ray ``λ = t d`` from the origin the multivariate series summed to
total degree k is the one-coupling series of ``H0 + t (d₁ V₁ + d₂ V₂)``
truncated at order k (collect the powers of t).  So the boundary along each
ray is the one-coupling :func:`ptcheck.compare.validity_boundary` of
``model.along(d)``, and the region is the star-shaped set swept by those
boundaries: ``{t d : 0 <= t < t*(d)}``.  :func:`validity_region` searches a
set of directions and refines the angle where the boundary changes fast;
:func:`ray_convergence` gives the radius of convergence of the one-variable
series on each ray (and its exceptional points in the complex t plane).

Angles are measured in the plane of *scaled* couplings
``(λ₁ / s₁, λ₂ / s₂)``, so that both couplings get a fair share of the
directions when their natural sizes differ (default ``s_i`` = isolation
distance of the target's levels / ‖V_i‖).  Every result also gives the
boundary points in the couplings themselves.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _validation as val
from .compare import ValidityBoundary, validity_boundary
from .convergence import ConvergenceResult, convergence
from .model import Model
from .multiseries import as_coupling_points, check_multi
from .quantities import Quantity

__all__ = ["ValidityRegion", "RayConvergence", "validity_region", "ray_convergence", "DEFAULT_DIRECTIONS"]

#: Directions searched before refinement (evenly spread over the full circle).
DEFAULT_DIRECTIONS = 16
#: Largest number of directions after refinement.
MAX_DIRECTIONS = 64


def _ro(a: Any, dtype: Any = float) -> np.ndarray:
    a = np.array(a, dtype=dtype)
    a.setflags(write=False)
    return a


def _jf(x: float) -> float | str:
    return float(x) if math.isfinite(x) else str(x)


@dataclass(frozen=True, repr=False, eq=False)
class ValidityRegion:
    """Where one order meets a tolerance, direction by direction.

    Attributes
    ----------
    target : str
        Level label or quantity name.
    order : int
        Total degree of the multivariate series judged.
    tol, rtol : float or None
        The tolerance asked for.
    coupling_names : tuple of str
        Names of the two couplings.
    scales : (2,) ndarray
        ``s_i``: the angle θ is measured in the plane ``(λ₁/s₁, λ₂/s₂)``.
    angles : (D,) ndarray
        Directions searched (radians, in the scaled plane), ascending.
    directions : (D, 2) ndarray
        The coupling vectors ``d = (s₁ cos θ, s₂ sin θ)`` of the rays.
    boundary : (D,) ndarray
        ``t*`` along each ray (the boundary point is ``t* d``); ``inf`` where
        the tolerance holds up to the search limit, 0 where it fails at once,
        NaN where the boundary is ill defined.
    points : (D, 2) ndarray
        Boundary points ``t* d`` in the couplings themselves.
    status : tuple of str
        The one-coupling boundary status per ray (``"found"``, ``"not_reached"``,
        ``"fails_at_zero"``, ``"ill_defined"``).
    boundaries : tuple of ValidityBoundary
        The one-coupling results per ray.
    full_circle : bool
        The directions cover the whole circle (the curve is closed).
    exact_solves : int
        Exact diagonalisations used in all.
    notes : tuple of str
    """

    target: str
    order: int
    tol: float | None
    rtol: float | None
    coupling_names: tuple[str, str]
    scales: np.ndarray
    angles: np.ndarray
    directions: np.ndarray
    boundary: np.ndarray
    points: np.ndarray
    status: tuple[str, ...]
    boundaries: tuple[ValidityBoundary, ...] = field(repr=False)
    full_circle: bool
    exact_solves: int
    notes: tuple[str, ...] = ()

    def curve(self) -> tuple[np.ndarray, np.ndarray]:
        """Boundary curve (λ₁, λ₂), closed when the directions cover the circle.

        Rays whose boundary was not reached are drawn at their search limit;
        ill-defined ones are skipped.
        """
        t = np.array(self.boundary, dtype=float)
        lim = np.array([b.max_coupling for b in self.boundaries])
        t = np.where(np.isinf(t), lim, t)
        keep = np.isfinite(t)
        x = t[keep] * self.directions[keep, 0]
        y = t[keep] * self.directions[keep, 1]
        if self.full_circle and x.size:
            x, y = np.append(x, x[0]), np.append(y, y[0])
        return x, y

    def contains(self, point: Any) -> bool:
        """Is the coupling point inside the region (interpolating t* in the angle)?"""
        p = as_coupling_points(point, 2, "point")
        z = p / self.scales
        r = float(np.hypot(*z))
        if r == 0.0:
            return True
        th = math.atan2(z[1], z[0]) % (2 * math.pi)
        t = self.boundary
        ang = self.angles
        if self.full_circle:
            ang = np.append(ang, ang[0] + 2 * math.pi)
            t = np.append(t, t[0])
        tt = float(np.interp(th, ang, t, left=np.nan, right=np.nan)) if np.all(np.isfinite(t)) else _interp_inf(th, ang, t)
        return bool(r < tt)

    def __repr__(self) -> str:
        tl = f"tol={self.tol:g}" if self.tol is not None else f"rtol={self.rtol:g}"
        return (
            f"ValidityRegion({self.target}, order {self.order}, {tl}: {self.angles.size} directions, "
            f"exact_solves={self.exact_solves})"
        )

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "order": self.order,
            "tol": self.tol,
            "rtol": self.rtol,
            "coupling_names": list(self.coupling_names),
            "scales": self.scales.tolist(),
            "angles": self.angles.tolist(),
            "directions": self.directions.tolist(),
            "boundary": [_jf(x) for x in self.boundary],
            "points": [[_jf(x) for x in p] for p in self.points],
            "status": list(self.status),
            "full_circle": self.full_circle,
            "exact_solves": self.exact_solves,
            "notes": list(self.notes),
        }

    def _repr_html_(self) -> str:
        n1, n2 = self.coupling_names
        rows = "".join(
            f"<tr><td>{math.degrees(a):.1f}°</td><td>{p[0]:.4g}</td><td>{p[1]:.4g}</td><td>{html.escape(s)}</td></tr>"
            for a, p, s in zip(self.angles, self.points, self.status)
        )
        return (
            f"<b>Validity region</b> of {html.escape(self.target)}, order {self.order} "
            f"({self.exact_solves} exact solves)<table><tr><th>θ</th><th>{html.escape(n1)}*</th>"
            f"<th>{html.escape(n2)}*</th><th>status</th></tr>{rows}</table>"
        )


def _interp_inf(th: float, ang: np.ndarray, t: np.ndarray) -> float:
    i = int(np.searchsorted(ang, th))
    i = min(max(i, 1), ang.size - 1)
    a, b = t[i - 1], t[i]
    if not (np.isfinite(a) and np.isfinite(b)):
        return float(min(a, b)) if not (np.isnan(a) or np.isnan(b)) else float("nan")
    w = (th - ang[i - 1]) / (ang[i] - ang[i - 1])
    return float(a + w * (b - a))


def default_scales(model: Model, target: Any) -> np.ndarray:
    """``s_i`` = smallest isolation distance of the target's levels / ‖V_i‖ (1 where V_i = 0)."""
    weights = target.resolve(model) if isinstance(target, Quantity) else {model.level_index(target): 1.0}
    gaps = []
    for n in weights:
        d = np.abs(model.e0 - model.e0[n])
        d = d[d > model.degeneracy_tol]
        if d.size:
            gaps.append(float(d.min()))
    gap = min(gaps) if gaps else 1.0
    out = []
    for nv in model.norms_v:
        out.append(gap / nv if nv > 0 else 1.0)
    return np.asarray(out, dtype=float)


def _angles_of(directions: Any, scales: np.ndarray) -> tuple[np.ndarray, bool]:
    if directions is None:
        directions = DEFAULT_DIRECTIONS
    if isinstance(directions, (int, np.integer)) and not isinstance(directions, bool):
        k = val.check_int(directions, "directions", minimum=3, maximum=MAX_DIRECTIONS)
        return np.linspace(0.0, 2 * math.pi, k, endpoint=False), True
    a = np.asarray(directions, dtype=float)
    if a.ndim == 1:
        ang = np.mod(a, 2 * math.pi)
    elif a.ndim == 2 and a.shape[1] == 2:
        if np.any(np.hypot(a[:, 0], a[:, 1]) == 0):
            raise ValueError("directions must be non-zero vectors; got a zero row")
        ang = np.mod(np.arctan2(a[:, 1] / scales[1], a[:, 0] / scales[0]), 2 * math.pi)
    else:
        raise ValueError(
            f"directions must be a number of directions (int >= 3), angles in radians (1-D) or vectors (D, 2); got shape {a.shape}"
        )
    if ang.size == 0 or not np.all(np.isfinite(ang)):
        raise ValueError(f"directions must be finite and non-empty; got {directions!r}")
    return np.unique(ang), False


def _needs_split(a: ValidityBoundary, b: ValidityBoundary, rtol: float) -> bool:
    ta, tb = abs(a.coupling), abs(b.coupling)
    if a.status != b.status:
        return True
    if not (math.isfinite(ta) and math.isfinite(tb)):
        return False
    return abs(ta - tb) > rtol * max(min(ta, tb), 1e-300)


def validity_region(
    model: Model,
    target: Any,
    order: int,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    directions: Any = None,
    scales: Any = None,
    refine_rtol: float = 0.1,
    max_directions: int = MAX_DIRECTIONS,
    max_coupling: float | None = None,
    **boundary_options: Any,
) -> ValidityRegion:
    """Where the order-``order`` multivariate series meets a tolerance, along rays.

    Parameters
    ----------
    model : Model
        A model with two couplings, ``Model(h0, [v1, v2], names=(...))``.
    target : level key or Quantity
    order : int
        Total degree of the series (terms ``λ₁^a λ₂^b`` with ``a + b <= order``).
    tol, rtol : float, optional
        Absolute (energy units) or relative tolerance; give exactly one.
    directions : int or array_like, optional
        Number of evenly spread directions to start with (default
        :data:`DEFAULT_DIRECTIONS`, the full circle), or angles in radians
        (scaled plane), or coupling vectors of shape (D, 2).
    scales : (2,) array_like, optional
        ``s_i`` of the scaled plane (default: isolation distance / ‖V_i‖).
    refine_rtol : float, default 0.1
        A pair of neighbouring directions whose boundaries differ by more than
        this fraction (or whose status differs) gets the direction between
        them, until ``max_directions``.
    max_directions : int, default 64
    max_coupling : float, optional
        Largest ``t`` searched along a ray (in units of the direction vector).
    **boundary_options
        Passed on to :func:`ptcheck.compare.validity_boundary` (treatment,
        backend, ...).

    Returns
    -------
    ValidityRegion

    Examples
    --------
    >>> import numpy as np
    >>> from ptcheck import Model
    >>> m = Model(np.diag([0.0, 1.0, 2.5]), [np.array([[0, .3, 0], [.3, 0, .2], [0, .2, 0]]),
    ...           np.diag([0.0, 0.2, -0.1])], names=("g", "E"))
    >>> r = validity_region(m, 0, 2, rtol=0.05, directions=8, max_directions=8)
    >>> r.points.shape
    (8, 2)
    """
    check_multi(model, "validity_region")
    if model.n_couplings != 2:
        raise ValueError(f"validity_region draws regions of two couplings; model {model.name!r} has {model.n_couplings}")
    order = val.check_int(order, "order", minimum=0)
    if isinstance(target, list):
        raise TypeError("validity_region takes one level or quantity; got a list")
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
    refine_rtol = float(val.check_positive(refine_rtol, "refine_rtol"))
    max_directions = val.check_int(max_directions, "max_directions", minimum=3, maximum=1024)
    s = default_scales(model, target) if scales is None else as_coupling_points(scales, 2, "scales")
    if s.ndim != 1 or np.any(s <= 0):
        raise ValueError(f"scales must be two positive numbers; got {scales!r}")
    angles, full = _angles_of(directions, s)
    name = target.name if isinstance(target, Quantity) else model.label(model.level_index(target))

    results: dict[float, ValidityBoundary] = {}

    def run(theta: float) -> ValidityBoundary:
        d = np.array([s[0] * math.cos(theta), s[1] * math.sin(theta)])
        ray = model.along(d)
        b = validity_boundary(ray, target, order, tol=tol, rtol=rtol, max_coupling=max_coupling, **boundary_options)
        results[theta] = b
        return b

    for th in angles:
        run(float(th))
    while len(results) < max_directions:
        ang = sorted(results)
        pairs = list(zip(ang[:-1], ang[1:]))
        if full and len(ang) > 1:
            pairs.append((ang[-1], ang[0] + 2 * math.pi))
        todo = []
        for a, b in pairs:
            if b - a < 1e-3:
                continue
            if _needs_split(results[a], results[b % (2 * math.pi) if b >= 2 * math.pi else b], refine_rtol):
                todo.append(0.5 * (a + b) % (2 * math.pi))
        if not todo:
            break
        for th in todo[: max_directions - len(results)]:
            run(float(th))
    ang = np.array(sorted(results))
    bs = tuple(results[a] for a in ang)
    dirs = np.stack([s[0] * np.cos(ang), s[1] * np.sin(ang)], axis=1)
    t = np.array([abs(b.coupling) if b.status != "ill_defined" else np.nan for b in bs])
    t = np.where([b.status == "fails_at_zero" for b in bs], 0.0, t)
    with np.errstate(invalid="ignore"):
        pts = t[:, None] * dirs
    notes = []
    if len(results) >= max_directions:
        notes.append(f"the angle refinement stopped at max_directions={max_directions}; the curve may miss narrow features")
    if any(b.status == "ill_defined" for b in bs):
        notes.append("on some rays the relative error is ill defined (the exact reference passes through zero); use tol=")
    for b in bs:
        for nt in b.notes:
            if nt not in notes and "exact for the matrices given" in nt:
                notes.append(nt)
    return ValidityRegion(
        target=name,
        order=order,
        tol=None if tol is None else float(tol),
        rtol=None if rtol is None else float(rtol),
        coupling_names=tuple(model.coupling_names),
        scales=_ro(s),
        angles=_ro(ang),
        directions=_ro(dirs),
        boundary=_ro(t),
        points=_ro(pts),
        status=tuple(b.status for b in bs),
        boundaries=bs,
        full_circle=full,
        exact_solves=int(sum(b.exact_solves for b in bs)),
        notes=tuple(notes),
    )


@dataclass(frozen=True, repr=False, eq=False)
class RayConvergence:
    """Radius of convergence of the one-variable series on each ray ``λ = t d``.

    Attributes
    ----------
    target : str
    angles : (D,) ndarray
        Directions (radians, scaled plane as in :class:`ValidityRegion`).
    directions : (D, 2) ndarray
    radius : (D,) ndarray
        Radius in t on each ray (``inf`` terminating, 0 asymptotic).
    points : (D, 2) ndarray
        ``radius × d``: where each ray leaves the disc of convergence.
    kind : tuple of str
        Growth class per ray.
    exceptional_points : tuple of (P,) complex ndarray
        Exceptional points of the ray's complex line (in t), per ray.
    results : tuple of ConvergenceResult
    """

    target: str
    coupling_names: tuple[str, str]
    scales: np.ndarray
    angles: np.ndarray
    directions: np.ndarray
    radius: np.ndarray
    points: np.ndarray
    kind: tuple[str, ...]
    exceptional_points: tuple = field(repr=False)
    results: tuple[ConvergenceResult, ...] = field(repr=False)

    def __repr__(self) -> str:
        return f"RayConvergence({self.target}, {self.angles.size} directions, radius {np.nanmin(self.radius):.4g}..{np.nanmax(self.radius):.4g})"

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "coupling_names": list(self.coupling_names),
            "angles": self.angles.tolist(),
            "directions": self.directions.tolist(),
            "radius": [_jf(x) for x in self.radius],
            "kind": list(self.kind),
            "exceptional_points": [[[float(z.real), float(z.imag)] for z in e] for e in self.exceptional_points],
        }

    def _repr_html_(self) -> str:
        return html.escape(repr(self))


def ray_convergence(
    model: Model,
    target: Any,
    *,
    directions: Any = None,
    scales: Any = None,
    order: int = 40,
    **options: Any,
) -> RayConvergence:
    """Radius of convergence along each ray (one-variable series of ``model.along(d)``).

    Parameters
    ----------
    model : Model
        Two couplings.
    target : level key or Quantity
    directions, scales
        As in :func:`validity_region` (no refinement here).
    order : int, default 40
        Order of the one-variable series analysed on each ray.
    **options
        Passed on to :func:`ptcheck.convergence.convergence`.

    Returns
    -------
    RayConvergence
    """
    check_multi(model, "ray_convergence")
    s = default_scales(model, target) if scales is None else as_coupling_points(scales, 2, "scales")
    angles, _ = _angles_of(directions, s)
    dirs = np.stack([s[0] * np.cos(angles), s[1] * np.sin(angles)], axis=1)
    res = tuple(convergence(model.along(d), target, order, **options) for d in dirs)
    rad = np.array([r.radius for r in res], dtype=float)
    name = target.name if isinstance(target, Quantity) else model.label(model.level_index(target))
    return RayConvergence(
        target=name,
        coupling_names=tuple(model.coupling_names),
        scales=_ro(s),
        angles=_ro(angles),
        directions=_ro(dirs),
        radius=_ro(rad),
        points=_ro(rad[:, None] * dirs),
        kind=tuple(r.kind for r in res),
        exceptional_points=tuple(r.exceptional_points for r in res),
        results=res,
    )
