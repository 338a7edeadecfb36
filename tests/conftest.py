"""Shared fixtures: small reference models built from closed forms (not from ptcheck.models)."""

import os

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import settings

import matplotlib

matplotlib.use("Agg")

# Property tests draw the same examples on every run (CI reproducible); HYPOTHESIS_PROFILE=explore draws new ones.
settings.register_profile("ptcheck", derandomize=True, deadline=None, print_blob=True)
settings.register_profile("explore", deadline=None, print_blob=True)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ptcheck"))


def oscillator_x(n_basis: int, headroom: int = 6) -> np.ndarray:
    """Position operator x = (a + a†)/√2 (m = ω = ħ = 1) in the lowest n_basis number states.

    Built in a larger basis and truncated so that powers of x have exact low-lying elements.
    """
    n = n_basis + headroom
    a = np.diag(np.sqrt(np.arange(1, n)), 1)
    return (a + a.T) / np.sqrt(2.0)


def oscillator_power(k: int, n_basis: int) -> np.ndarray:
    x = oscillator_x(n_basis, headroom=k + 2)
    return np.linalg.matrix_power(x, k)[:n_basis, :n_basis]


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


def random_hermitian(rng, n, *, complex_=False, sparse=False, density=0.3):
    a = rng.normal(size=(n, n))
    if complex_:
        a = a + 1j * rng.normal(size=(n, n))
    if sparse:
        mask = rng.random((n, n)) < density
        a = a * mask
    h = (a + a.conj().T) / 2
    return sp.csr_matrix(h) if sparse else h


def ising_ring(n: int, j: float = 1.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Transverse-field Ising ring as plain matrices: H0 = −J Σ σz_i σz_{i+1}, V = −J Σ σx_i and the spin-flip
    parity Π σx, by Kronecker products of Pauli matrices (site 0 most significant; common practice, no source)."""
    sz, sx, one = np.diag([1.0, -1.0]), np.array([[0.0, 1.0], [1.0, 0.0]]), np.eye(2)

    def site(op, i):
        out = np.ones((1, 1))
        for k in range(n):
            out = np.kron(out, op if k == i else one)
        return out

    h0 = -j * sum(site(sz, i) @ site(sz, (i + 1) % n) for i in range(n))
    v = -j * sum(site(sx, i) for i in range(n))
    parity = np.ones((1, 1))
    for _ in range(n):
        parity = np.kron(parity, sx)
    return h0, v, parity


def two_level_rs2_boundary(v: float, rtol: float, lam_max: float = 3.0) -> float:
    """First λ where order-2 RS of the lower level of diag(−½, ½) + λ v σx misses rtol of the exact shift.

    Exact: E = −√(¼ + v²λ²) (2×2 eigenvalue, closed form); RS order 2: E = −½ − v²λ²
    (second-order shift |V01|²/(E0 − E1)); textbook two-state results, e.g. Sakurai,
    Modern Quantum Mechanics (1994), §5.1.  Brute force: a grid of step 1e-4 up to
    ``lam_max`` to bracket, scipy's brentq to refine.
    """
    from scipy.optimize import brentq

    def excess(lam: float) -> float:
        shift = -np.sqrt(0.25 + (v * lam) ** 2) + 0.5
        return abs(-(v * lam) ** 2 - shift) / abs(shift) - rtol

    grid = np.linspace(1e-4, lam_max, int(round(lam_max * 1e4)) + 1)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    assert vals[i] > 0 and vals[i - 1] <= 0
    return brentq(excess, grid[i - 1], grid[i], xtol=1e-12)
