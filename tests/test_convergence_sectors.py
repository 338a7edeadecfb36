"""Convergence is judged inside the level's symmetry sector: each level gets its own radius and exceptional points.

Brute force is the referee: the exceptional points (EPs) of one M sector of a linear rotor in a field are found
here by scanning the smallest eigenvalue gap of the dense complex matrix H0 + λV (numpy.linalg.eigvals) on a polar
grid of the upper half λ-plane and polishing each local minimum with a secant iteration on (E_a − E_b)², which has
a simple zero at an EP (common practice, no source).  An EP limits level n's series when level n's eigenvalue,
continued from λ = 0 along the straight ray to the EP, is one of the coalescing pair there (the radius of
convergence of a Taylor series is the distance to the nearest singularity of the branch; Kato, Perturbation
Theory for Linear Operators, 1966, ch. II §1).
"""

from __future__ import annotations

import numpy as np
import pytest

from ptcheck import Model, convergence, divergence_map
from ptcheck.models import linear_rotor

B, MU_E, J_MAX = 1.0, 0.5, 10


def rotor_sector(m: int) -> tuple[np.ndarray, np.ndarray]:
    """H0 and V of the M sector (J = |M| .. J_MAX), from the direction-cosine matrix element
    ⟨J+1, M|cos θ|J, M⟩ = √[((J+1)² − M²)/((2J+1)(2J+3))] (Townes & Schawlow, Microwave Spectroscopy, 1955;
    quoted from memory)."""
    js = np.arange(abs(m), J_MAX + 1, dtype=float)
    off = np.sqrt(((js[:-1] + 1) ** 2 - m**2) / ((2 * js[:-1] + 1) * (2 * js[:-1] + 3)))
    return np.diag(B * js * (js + 1)), -MU_E * (np.diag(off, 1) + np.diag(off, -1))


def _closest_pair(h: np.ndarray) -> tuple[complex, complex]:
    e = np.linalg.eigvals(h)
    d = np.abs(e[:, None] - e[None, :])
    np.fill_diagonal(d, np.inf)
    a, b = np.unravel_index(np.argmin(d), d.shape)
    return (e[a] - e[b]) ** 2, 0.5 * (e[a] + e[b])


def exceptional_points(h0: np.ndarray, v: np.ndarray, rmax: float) -> list[tuple[complex, complex]]:
    """EPs (Im λ > 0, |λ| <= rmax) and their energies, by a gap scan on a polar grid + secant polish."""
    n = h0.shape[0]
    r = np.linspace(rmax / 80, rmax, 80)
    t = np.linspace(0.0, np.pi, 162)[1:-1]
    lam = r[:, None] * np.exp(1j * t[None, :])
    w = np.linalg.eigvals(h0[None, None] + lam[..., None, None] * v[None, None])
    d = np.abs(w[..., :, None] - w[..., None, :])
    d[..., np.arange(n), np.arange(n)] = np.inf
    gap = d.min(axis=(-1, -2))
    seeds = [lam[i, j] for i in range(gap.shape[0]) for j in range(gap.shape[1])
             if gap[i, j] <= gap[max(i - 1, 0) : i + 2, max(j - 1, 0) : j + 2].min()]
    scale = np.max(np.abs(np.diag(h0))) + rmax * np.max(np.abs(np.linalg.eigvalsh(v)))
    out: list[tuple[complex, complex]] = []
    for z0 in seeds:
        z1 = z0 * (1 + 1e-3)
        f0, f1 = _closest_pair(h0 + z0 * v)[0], _closest_pair(h0 + z1 * v)[0]
        for _ in range(40):
            if f1 == f0:
                break
            z0, z1 = z1, z1 - f1 * (z1 - z0) / (f1 - f0)
            f0, f1 = f1, _closest_pair(h0 + z1 * v)[0]
            if abs(z1 - z0) < 1e-13 * abs(z1):
                break
        if abs(f1) < 1e-12 * scale**2 and z1.imag > 0 and abs(z1) <= rmax:
            if not any(abs(z1 - z) < 1e-6 * abs(z1) for z, _ in out):
                out.append((z1, _closest_pair(h0 + z1 * v)[1]))
    return out


def continued_energy(h0: np.ndarray, v: np.ndarray, e_start: float, target: complex, stop: float = 1 - 1e-6) -> complex:
    """The eigenvalue that starts at ``e_start`` (λ = 0), followed along λ = t·target, t from 0 to ``stop``;
    a step is accepted only when the nearest eigenvalue is 4 x closer than the next one (else halved)."""
    e, t, dt = complex(e_start), 0.0, 1e-3
    while t < stop:
        step = min(dt, stop - t)
        w = np.linalg.eigvals(h0 + (t + step) * target * v)
        d = np.sort(np.abs(w - e))
        if d[1] < 4 * d[0] and step > 1e-9:
            dt = step / 2
            continue
        e, t, dt = w[np.argmin(np.abs(w - e))], t + step, min(2 * step, 0.02)
    return e


def brute_force_radius(m: int, j: int, rmax: float) -> float:
    """Distance to the nearest EP on the branch of level (j, m) within ``rmax`` (inf if none)."""
    h0, v = rotor_sector(m)
    e0 = h0[j - abs(m), j - abs(m)]
    mine = []
    for z, e_ep in exceptional_points(h0, v, rmax):
        e = continued_energy(h0, v, e0, z)
        if abs(e - e_ep) < 1e-2 * max(1.0, abs(e_ep)):
            mine.append(abs(z))
    return min(mine, default=np.inf)


@pytest.fixture(scope="module")
def rotor():
    return linear_rotor(b=B, mu_e=MU_E, j_max=J_MAX)


@pytest.mark.parametrize("label", [(0, 0), (1, 0), (2, 0), (1, 1), (2, 2), (5, -5)])
def test_rotor_radius_is_that_of_the_levels_own_m_sector(rotor, label):
    r = convergence(rotor, label, 40)
    assert r.kind == "convergent" and r.agreement == "agree"
    # brute force on the dense sector matrix: no EP on the branch closer than the radius, one at the radius
    want = brute_force_radius(label[1], label[0], 1.3 * r.radius)
    assert r.radius == pytest.approx(want, rel=1e-7)
    assert abs(r.exceptional_points[0]) == pytest.approx(want, rel=1e-7)
    # the partner at the EP lives in the same sector; Kato's bound uses the sector's own isolation and ‖V‖
    sector = rotor.sector_of(label)
    assert all(rotor.sector_of(int(p)) == sector for p in r.partners)
    h0, v = rotor_sector(label[1])
    d = np.diff(np.diag(h0))
    k = label[0] - abs(label[1])
    iso = min(d[k - 1] if k > 0 else np.inf, d[k] if k < d.size else np.inf)
    assert r.kato_bound == pytest.approx(iso / (2 * np.max(np.abs(np.linalg.eigvalsh(v)))), rel=1e-9)
    assert any("symmetry sector" in note for note in r.notes)


def test_rotor_sectors_give_different_radii(rotor):
    # issue: every level got the same radius (the EP search ran on the whole model, where levels of different
    # M sectors with equal E0 made the continuation fail)
    dm = divergence_map(rotor, [(1, 0), (1, 1), (2, 2)], order=30)
    assert len({round(float(x), 6) for x in dm.radius}) == 3
    assert all(k == "convergent" for k in dm.kinds)
    assert all(e.size for e in dm.exceptional_points)
    for r, label in zip(dm.results, [(1, 0), (1, 1), (2, 2)]):
        assert r.radius == pytest.approx(convergence(rotor, label, 30).radius, rel=1e-9)


def test_one_sector_model_is_analysed_as_before():
    # two-level closed form: EPs at λ = ±iΔ/(2|v|) (Kato 1966, ch. II §1, example); no sector note
    m = Model(np.diag([0.0, 1.0]), [[0, 0.25], [0.25, 0]])
    r = convergence(m, 0, 30)
    assert r.radius == pytest.approx(2.0, rel=1e-9)
    assert not any("symmetry sector" in note for note in r.notes)


def test_degenerate_group_kato_bound_is_that_of_its_sector():
    # two uncoupled copies of a Λ system (invented numbers): each copy is one component of the coupling graph.
    # Copy B sits at E0 = 0.1 next to copy A's degenerate pair: across sectors that is no neighbour, so the Kato
    # bound of A's degenerate group uses only A's own excited state (gap 2.0) and A's ‖V‖ (Kato 1966, ch. II §3)
    o1, o2, delta = 0.3, 0.4, 2.0
    a_h0, a_v = np.diag([0.0, 0.0, delta]), np.array([[0, 0, o1], [0, 0, o2], [o1, o2, 0]])
    b_h0, b_v = np.diag([0.1, 3.0]), np.array([[0, 1.5], [1.5, 0]])
    h0 = np.zeros((5, 5))
    v = np.zeros((5, 5))
    h0[:3, :3], v[:3, :3] = a_h0, a_v
    h0[3:, 3:], v[3:, 3:] = b_h0, b_v
    m = Model(h0, v, labels=["1", "2", "e", "b0", "b1"])
    r = convergence(m, "1", 12)
    assert r.treatment == "degenerate"
    norm_a = np.max(np.abs(np.linalg.eigvalsh(a_v)))
    assert r.isolation == pytest.approx(delta)
    assert r.kato_bound == pytest.approx(delta / (2 * norm_a), rel=1e-12)
