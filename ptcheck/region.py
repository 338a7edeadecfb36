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

The region is what each ray says: a feature narrower than the angular
spacing of the rays (a thin sliver where an avoided crossing cuts in) can be
missed between two rays; ``notes`` says when the refinement stopped early,
and the boundary through the coupling point you use (``point=``) is always
computed on its own ray.
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
from .degeneracy import DEFAULT_MIXING_THRESHOLD
from .model import Model
from .multiseries import as_coupling_points, check_multi, ray_target, target_name
from .quantities import Quantity
from .treatment import DEFAULT_TREATMENT

__all__ = [
    "ValidityRegion",
    "RayConvergence",
    "validity_region",
    "ray_convergence",
    "default_scales",
    "DEFAULT_DIRECTIONS",
    "DEFAULT_MAX_T",
    "MAX_DIRECTIONS",
]

#: Directions searched before refinement (evenly spread over the full circle).
DEFAULT_DIRECTIONS = 16
#: Default largest number of directions after refinement.
MAX_DIRECTIONS = 64
#: Default largest t searched on a ray (units of the scaled direction: t = 1 is where
#: the couplings reach their natural scales s_i, mixing ratios of order one).
DEFAULT_MAX_T = 10.0
#: Neighbouring rays closer than this (radians) are never split further.
_MIN_ANGLE = 1e-3



def _unit(c: Any) -> Any:
    """cos/sin of an angle with the round-off of exact axes removed (cos 90° is 0, not 6e-17): a ray along an
    axis must not pick up a 1e-17 share of the other coupling."""
    return np.where(np.abs(c) < 1e-12, 0.0, c) if isinstance(c, np.ndarray) else (0.0 if abs(c) < 1e-12 else c)

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
        The tolerance asked for (absolute in energy units, or relative).
    coupling_names : tuple of str
        Names of the two couplings.
    scales : (2,) ndarray
        ``s_i``: the angle θ is measured in the plane ``(λ₁/s₁, λ₂/s₂)``.
    angles : (D,) ndarray
        Directions searched (radians in [0, 2π), scaled plane), ascending.
    directions : (D, 2) ndarray
        The coupling vectors ``d = (s₁ cos θ, s₂ sin θ)`` of the rays.
    boundary : (D,) ndarray
        ``t*`` along each ray (the boundary point is ``t* d``); ``inf`` where
        the tolerance holds up to the search limit, 0 where it fails at once,
        NaN where the boundary is ill defined or the target is exact in its sector.
    points : (D, 2) ndarray
        Boundary points ``t* d`` in the couplings themselves (inf / NaN as above).
    status : tuple of str
        The one-coupling boundary status per ray (``"found"``, ``"not_reached"``,
        ``"fails_at_zero"``, ``"ill_defined"``, ``"exact_in_sector"``).
    boundaries : tuple of ValidityBoundary
        The one-coupling results per ray.
    full_circle : bool
        The directions cover the whole circle (the curve is closed).
    exact_solves : int
        Exact diagonalisations used in all.
    point : (2,) ndarray or None
        The coupling point asked about (``point=``), if any.
    point_ray : int or None
        Index of the ray through ``point`` in :attr:`angles`.
    notes : tuple of str
    model_name : str
        Name of the model (for captions).
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
    point: np.ndarray | None = None
    point_ray: int | None = None
    notes: tuple[str, ...] = ()
    model_name: str = ""

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

    def boundary_at(self, angle: float) -> float:
        """``t*`` at any angle (scaled plane), interpolated linearly between the neighbouring rays."""
        th = float(angle) % (2 * math.pi)
        ang, t = np.asarray(self.angles), np.asarray(self.boundary)
        if self.full_circle:
            ang = np.concatenate([ang[-1:] - 2 * math.pi, ang, ang[:1] + 2 * math.pi])
            t = np.concatenate([t[-1:], t, t[:1]])
        if th < ang[0] or th > ang[-1]:
            return math.nan
        i = int(np.searchsorted(ang, th))
        if i < ang.size and ang[i] == th:
            return float(t[i])
        a, b = t[i - 1], t[i]
        if math.isnan(a) or math.isnan(b):
            return math.nan
        if not (math.isfinite(a) and math.isfinite(b)):
            return float(min(a, b))
        w = (th - ang[i - 1]) / (ang[i] - ang[i - 1])
        return float(a + w * (b - a))

    def contains(self, point: Any) -> bool:
        """Is the coupling point inside the region (``t*`` interpolated in the angle)?

        On the ray of :attr:`point` the answer is that ray's own result.
        """
        p = as_coupling_points(point, 2, "point")
        if p.ndim != 1:
            raise ValueError(f"point must be one pair of couplings; got shape {p.shape}")
        z = p / self.scales
        r = float(np.hypot(*z))
        if r == 0.0:
            return True
        th = math.atan2(z[1], z[0]) % (2 * math.pi)
        hit = np.flatnonzero(np.abs(np.asarray(self.angles) - th) < 1e-12)
        if hit.size:
            return self.boundaries[int(hit[0])].valid_at(r)
        return bool(r < self.boundary_at(th))

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
            "point": None if self.point is None else self.point.tolist(),
            "point_ray": self.point_ray,
            "notes": list(self.notes),
            "model_name": self.model_name,
        }

    def _repr_html_(self) -> str:
        n1, n2 = self.coupling_names
        rows = "".join(
            f"<tr><td>{math.degrees(a):.1f}°</td><td>{p[0]:.4g}</td><td>{p[1]:.4g}</td><td>{html.escape(s)}</td></tr>"
            for a, p, s in zip(self.angles, self.points, self.status)
        )
        notes = "".join(f"<li>{html.escape(n)}</li>" for n in self.notes)
        return (
            f"<b>Validity region</b> of {html.escape(self.target)}, order {self.order} "
            f"({self.exact_solves} exact solves)<table><tr><th>θ</th><th>{html.escape(n1)}*</th>"
            f"<th>{html.escape(n2)}*</th><th>status</th></tr>{rows}</table>" + (f"<ul>{notes}</ul>" if notes else "")
        )


def default_scales(model: Model, target: Any) -> np.ndarray:
    """``s_i`` = smallest isolation distance of the target's levels / ‖V_i‖ (1 where V_i = 0), shape (2,)."""
    weights = target.resolve(model) if isinstance(target, Quantity) else {model.level_index(target): 1.0}
    gaps = []
    for n in weights:
        d = np.abs(model.e0 - model.e0[n])
        d = d[d > model.degeneracy_tol]
        if d.size:
            gaps.append(float(d.min()))
    gap = min(gaps) if gaps else 1.0
    return np.asarray([gap / nv if nv > 0 else 1.0 for nv in model.norms_v], dtype=float)


def _scales(model: Model, target: Any, scales: Any) -> np.ndarray:
    if scales is None:
        return default_scales(model, target)
    s = as_coupling_points(scales, 2, "scales")
    if s.ndim != 1 or np.any(s <= 0):
        raise ValueError(f"scales must be two positive numbers; got {scales!r}")
    return s


def _angles_of(directions: Any, scales: np.ndarray) -> tuple[np.ndarray, bool]:
    """Starting angles (ascending, in [0, 2π)) and whether they stand for the whole circle."""
    if directions is None:
        directions = DEFAULT_DIRECTIONS
    if isinstance(directions, (int, np.integer)) and not isinstance(directions, bool):
        k = val.check_int(directions, "directions", minimum=3, maximum=1024)
        return np.linspace(0.0, 2 * math.pi, k, endpoint=False), True
    try:
        a = np.asarray(directions, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"directions must be an int, angles (radians) or (D, 2) vectors; got {directions!r}") from None
    if a.ndim == 1:
        ang = np.mod(a, 2 * math.pi)
    elif a.ndim == 2 and a.shape[1] == 2:
        if np.any(np.hypot(a[:, 0], a[:, 1]) == 0):
            raise ValueError(f"directions must be non-zero vectors; got {directions!r}")
        ang = np.mod(np.arctan2(a[:, 1] / scales[1], a[:, 0] / scales[0]), 2 * math.pi)
    else:
        raise ValueError(
            f"directions must be a number of directions (int >= 3), angles in radians (1-D) or vectors (D, 2); got shape {a.shape}"
        )
    if ang.size == 0 or not np.all(np.isfinite(ang)):
        raise ValueError(f"directions must be finite and non-empty; got {directions!r}")
    return np.unique(ang), False


def _needs_split(a: ValidityBoundary, b: ValidityBoundary, rtol: float) -> bool:
    if a.status != b.status:
        return True
    ta, tb = abs(a.coupling), abs(b.coupling)
    if not (math.isfinite(ta) and math.isfinite(tb)):
        return False
    return abs(ta - tb) > rtol * max(min(ta, tb), 1e-300)


def _direction(theta: float, s: np.ndarray) -> np.ndarray:
    return np.array([s[0] * _unit(math.cos(theta)), s[1] * _unit(math.sin(theta))])


def validity_region(
    model: Model,
    target: Any,
    order: int,
    *,
    tol: float | None = None,
    rtol: float | None = None,
    directions: Any = None,
    scales: Any = None,
    point: Any = None,
    refine_rtol: float = 0.1,
    max_directions: int = MAX_DIRECTIONS,
    max_coupling: float | None = None,
    treatment: str = DEFAULT_TREATMENT,
    backend: str = "auto",
    xrtol: float = 1e-3,
    threshold: float = DEFAULT_MIXING_THRESHOLD,
) -> ValidityRegion:
    """Where the order-``order`` multivariate series meets a tolerance, along rays from the origin.

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
    point : (2,) array_like, optional
        The coupling point you use: its ray is searched too, with the
        guarantee of :func:`~ptcheck.compare.validity_boundary` for a coupling
        of interest (the first crossing below it is found).
    refine_rtol : float, default 0.1
        A pair of neighbouring directions whose boundaries differ by more than
        this fraction (or whose status differs) gets the direction between
        them, until ``max_directions``.
    max_directions : int, default 64
    max_coupling : float, optional
        Largest ``t`` searched along a ray, in units of the direction vector
        ``d = (s₁ cos θ, s₂ sin θ)`` (default :data:`DEFAULT_MAX_T`: ten times
        the natural scale of each coupling).  The ray through ``point`` always
        reaches past it.
    treatment, backend, xrtol, threshold
        As in :func:`~ptcheck.compare.validity_boundary`, on every ray.

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
    order = val.check_order(order, n=model.n)
    if isinstance(target, (list, set, range, np.ndarray)):
        raise TypeError(f"validity_region takes one level or quantity; got {target!r}")
    if (tol is None) == (rtol is None):
        raise ValueError(f"give exactly one of tol (absolute) or rtol (relative); got tol={tol!r}, rtol={rtol!r}")
    refine_rtol = float(val.check_positive(refine_rtol, "refine_rtol"))
    max_directions = val.check_int(max_directions, "max_directions", minimum=1, maximum=1024)
    max_coupling = DEFAULT_MAX_T if max_coupling is None else float(val.check_positive(max_coupling, "max_coupling"))
    name = target_name(model, target)
    s = _scales(model, target, scales)
    angles, full = _angles_of(directions, s)
    p = None
    theta_p = t_p = None
    if point is not None:
        p = as_coupling_points(point, 2, "point")
        if p.ndim != 1:
            raise ValueError(f"point must be one pair of couplings; got shape {p.shape}")
        if np.any(p != 0):
            z = p / s
            theta_p, t_p = math.atan2(z[1], z[0]) % (2 * math.pi), float(np.hypot(*z))
    options = dict(tol=tol, rtol=rtol, max_coupling=max_coupling, treatment=treatment, backend=backend, xrtol=xrtol,
                   threshold=threshold)
    results: dict[float, ValidityBoundary] = {}

    def run(theta: float, coupling: float | None = None) -> None:
        ray = model.along(_direction(theta, s))
        results[theta] = validity_boundary(ray, ray_target(model, ray, target), order, coupling=coupling,
                                           suggestions=coupling is not None, **options)

    if theta_p is not None:
        options_p = dict(options, max_coupling=max(max_coupling, 1.5 * t_p))
        ray = model.along(_direction(theta_p, s))
        results[theta_p] = validity_boundary(ray, ray_target(model, ray, target), order, coupling=t_p, **options_p)
    for th in angles:
        if theta_p is None or abs(float(th) - theta_p) > 1e-12:
            run(float(th))
    stopped = False
    while True:
        ang = sorted(results)
        pairs = list(zip(ang[:-1], ang[1:]))
        if full and len(ang) > 1:
            pairs.append((ang[-1], ang[0] + 2 * math.pi))
        todo = [
            (0.5 * (a + b)) % (2 * math.pi)
            for a, b in pairs
            if b - a >= _MIN_ANGLE and _needs_split(results[a], results[b % (2 * math.pi) if b >= 2 * math.pi else b], refine_rtol)
        ]
        if not todo:
            break
        room = max_directions - len(results)
        if room <= 0:
            stopped = True
            break
        if len(todo) > room:
            stopped = True
        for th in todo[:room]:
            run(float(th))
    ang = np.array(sorted(results))
    bs = tuple(results[a] for a in ang)
    dirs = np.stack([s[0] * _unit(np.cos(ang)), s[1] * _unit(np.sin(ang))], axis=1)
    t = np.array([_t_star(b) for b in bs])
    with np.errstate(invalid="ignore"):
        pts = t[:, None] * dirs
    pts[t == 0] = 0.0
    notes = []
    if stopped:
        notes.append(
            f"the angle refinement stopped at max_directions={max_directions} with neighbouring rays still differing by "
            f"more than refine_rtol={refine_rtol:g}: the curve may miss narrow features between rays"
        )
    if any(b.status == "ill_defined" for b in bs):
        notes.append("on some rays the relative error is ill defined (the exact reference passes through zero); use tol=")
    if any(b.status == "exact_in_sector" for b in bs):
        notes.append("on some rays the target is exact within its symmetry sector: no order is judged there")
    notes.extend(_ray_notes(bs, dirs))
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
        point=None if p is None else _ro(p),
        point_ray=None if theta_p is None else int(np.argmin(np.abs(ang - theta_p))),
        notes=tuple(notes),
        model_name=model.name,
    )


def _ray_notes(bs: tuple, dirs: np.ndarray) -> list[str]:
    """The rays' own notes, each once; a note of some rays only says on how many and gives one of them."""
    where: dict[str, list[int]] = {}
    for i, b in enumerate(bs):
        for nt in b.notes:
            where.setdefault(nt, []).append(i)
    out = []
    for nt, rays in where.items():
        if len(rays) == len(bs):
            out.append(nt)
        else:
            d = dirs[rays[0]]
            out.append(f"on {len(rays)} of {len(bs)} rays (e.g. towards ({d[0]:.3g}, {d[1]:.3g})): {nt}")
    return out


def _t_star(b: ValidityBoundary) -> float:
    if b.status == "fails_at_zero":
        return 0.0
    if b.status in ("ill_defined", "exact_in_sector"):
        return math.nan
    return abs(b.coupling)


@dataclass(frozen=True, repr=False, eq=False)
class RayConvergence:
    """Radius of convergence of the one-variable series on each ray ``λ = t d``.

    Attributes
    ----------
    target : str
    coupling_names : tuple of str
    scales : (2,) ndarray
        As in :class:`ValidityRegion`.
    angles : (D,) ndarray
        Directions (radians, scaled plane).
    directions : (D, 2) ndarray
        Coupling vectors d of the rays.
    radius : (D,) ndarray
        Radius in t on each ray (``inf``: terminating series, 0: asymptotic).
    points : (D, 2) ndarray
        ``radius × d``: where each ray leaves the disc of convergence.
    kind : tuple of str
        Growth class per ray.
    exceptional_points : tuple of (P,) complex ndarray
        Exceptional points of the ray's complex line (values of t), per ray.
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
        finite = self.radius[np.isfinite(self.radius)]
        span = f"{finite.min():.4g}..{finite.max():.4g}" if finite.size else "unbounded"
        return f"RayConvergence({self.target}, {self.angles.size} directions, radius {span})"

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "coupling_names": list(self.coupling_names),
            "scales": self.scales.tolist(),
            "angles": self.angles.tolist(),
            "directions": self.directions.tolist(),
            "radius": [_jf(x) for x in self.radius],
            "kind": list(self.kind),
            "exceptional_points": [[[float(z.real), float(z.imag)] for z in e] for e in self.exceptional_points],
        }

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{math.degrees(a):.1f}°</td><td>{r:.4g}</td><td>{html.escape(k)}</td></tr>"
            for a, r, k in zip(self.angles, self.radius, self.kind)
        )
        return (
            f"<b>Radius of convergence per ray</b> of {html.escape(self.target)}"
            f"<table><tr><th>θ</th><th>radius (t)</th><th>kind</th></tr>{rows}</table>"
        )


def ray_convergence(
    model: Model,
    target: Any,
    *,
    directions: Any = None,
    scales: Any = None,
    order: int = 40,
    ep_search: str = "auto",
) -> RayConvergence:
    """Radius of convergence along each ray (the one-variable series of ``model.along(d)``).

    Parameters
    ----------
    model : Model
        Two couplings.
    target : level key or Quantity
    directions, scales
        As in :func:`validity_region` (no refinement here).
    order : int, default 40
        Order of the one-variable series analysed on each ray.
    ep_search : str, default "auto"
        Passed on to :func:`ptcheck.convergence.convergence` (exceptional
        points of the ray's complex line).

    Returns
    -------
    RayConvergence
    """
    check_multi(model, "ray_convergence")
    if model.n_couplings != 2:
        raise ValueError(f"ray_convergence takes a model with two couplings; model {model.name!r} has {model.n_couplings}")
    order = val.check_order(order, n=model.n)
    s = _scales(model, target, scales)
    angles, _ = _angles_of(directions, s)
    dirs = np.stack([s[0] * _unit(np.cos(angles)), s[1] * _unit(np.sin(angles))], axis=1)
    res = []
    for d in dirs:
        ray = model.along(d)
        res.append(convergence(ray, ray_target(model, ray, target), order, ep_search=ep_search))
    rad = np.array([r.radius for r in res], dtype=float)
    with np.errstate(invalid="ignore"):
        pts = rad[:, None] * dirs
    return RayConvergence(
        target=target_name(model, target),
        coupling_names=tuple(model.coupling_names),
        scales=_ro(s),
        angles=_ro(angles),
        directions=_ro(dirs),
        radius=_ro(rad),
        points=_ro(pts),
        kind=tuple(r.kind for r in res),
        exceptional_points=tuple(r.exceptional_points for r in res),
        results=tuple(res),
    )
