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
