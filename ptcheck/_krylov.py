"""Small Krylov (Lanczos) runs with full reorthogonalisation, for the error bounds.

Two uses, both O(m · nnz + m² N) time and O(m N) memory for m steps:

- :func:`refine`: Rayleigh–Ritz in the Krylov space of H(λ) started from a trial
  state; returns the Ritz pair that overlaps the trial most, with its residual
  measured from stored H-products (no cancellation), and all Ritz values
  (the j-th smallest is an upper bound of the j-th exact eigenvalue: Cauchy
  interlacing, e.g. Parlett, *The Symmetric Eigenvalue Problem*, 1998, §10.1).
- :func:`deflated_spectrum`: Lanczos on P H P, P = 1 − |ψ⟩⟨ψ|, from a start
  vector orthogonal to ψ; its Ritz values estimate the spectrum of H with the
  level of ψ removed (the estimate of the neighbouring levels).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .model import Model


def h_matvec(model: Model, coupling: float):
    """x -> (H0 + λ V) x in the work basis."""
    e0, v, lam = model.e0, model.v, float(coupling)

    def mv(x: np.ndarray) -> np.ndarray:
        return e0 * x + lam * (v @ x)

    return mv


def _orthonormalise(x: np.ndarray, q: np.ndarray, j: int, extra: np.ndarray | None, passes: int = 2) -> tuple[np.ndarray, float]:
    """x minus its components along q[:j] (and ``extra``), ``passes`` times; return (unit vector, norm)."""
    for _ in range(passes):
        if extra is not None:
            x -= extra * np.vdot(extra, x)
        if j:
            x -= (q[:j].conj() @ x) @ q[:j]
    nrm = float(np.linalg.norm(x))
    return (x / nrm if nrm > 0 else x), nrm


@dataclass(frozen=True)
class Refined:
    """Best Ritz pair for a trial state: value, residual norm, all Ritz values, mat-vecs used."""

    value: float
    residual: float
    ritz_values: np.ndarray
    mat_vecs: int


def refine(model: Model, coupling: float, trial: np.ndarray, steps: int) -> Refined:
    """Rayleigh–Ritz of H(λ) in span{ψ, Hψ, …, H^(m−1) ψ} (``steps`` = m)."""
    mv = h_matvec(model, coupling)
    n = trial.size
    dtype = np.result_type(trial.dtype, model.v.dtype, np.float64)
    q = np.zeros((steps, n), dtype=dtype)
    hq = np.zeros((steps, n), dtype=dtype)
    q[0] = trial / np.linalg.norm(trial)
    used = 0
    dim = steps
    for j in range(steps):
        hq[j] = mv(q[j])
        used += 1
        if j + 1 == steps:
            break
        nxt, nrm = _orthonormalise(hq[j].copy(), q, j + 1, None)
        if nrm <= 1e-13 * max(float(np.linalg.norm(hq[j])), 1e-300):
            dim = j + 1  # invariant subspace reached
            break
        q[j + 1] = nxt
    q, hq = q[:dim], hq[:dim]
    t = q.conj() @ hq.T
    t = (t + t.conj().T) / 2
    w, s = np.linalg.eigh(t)
    overlap = np.abs(s[0, :])  # q[0] is the trial
    i = int(np.argmax(overlap))
    y = s[:, i]
    res = hq.T @ y - w[i] * (q.T @ y)
    return Refined(float(w[i]), float(np.linalg.norm(res)), w, used)


@dataclass(frozen=True)
class Deflated:
    """Ritz values of P H P (ψ removed), their Lanczos residual norms, a warm start, mat-vecs used."""

    ritz_values: np.ndarray
    residuals: np.ndarray
    warm: np.ndarray
    mat_vecs: int


def deflated_spectrum(
    model: Model, coupling: float, psi: np.ndarray, steps: int, start: np.ndarray, keep: int, h_norm: float
) -> Deflated:
    """Lanczos on P H(λ) P with P = 1 − |ψ⟩⟨ψ| (``psi`` normalised), reorthogonalised against all vectors.

    ``keep`` selects the Ritz vector returned as the next warm start (index in
    ascending Ritz order, clipped to the space built); ``h_norm`` bounds ‖H(λ)‖
    (breakdown test).
    """
    mv = h_matvec(model, coupling)
    n = psi.size
    steps = min(steps, n - 1)  # the space orthogonal to ψ has N − 1 dimensions
    dtype = np.result_type(psi.dtype, start.dtype, model.v.dtype, np.float64)
    q = np.zeros((steps + 1, n), dtype=dtype)
    first, nrm = _orthonormalise(start.astype(dtype), q, 0, psi)
    q[0] = first
    alpha = np.zeros(steps)
    beta = np.zeros(steps)
    used = 0
    dim = steps
    for j in range(steps):
        z = mv(q[j])
        used += 1
        z = z - psi * np.vdot(psi, z)
        alpha[j] = float(np.real(np.vdot(q[j], z)))
        z, b = _orthonormalise(z, q, j + 1, psi, passes=1)  # an estimate: one pass keeps it cheap
        beta[j] = b
        if b <= 1e-10 * max(h_norm, 1e-300):  # invariant subspace: stop before rounding noise makes ghosts
            dim = j + 1
            break
        q[j + 1] = z
    a, b = alpha[:dim], beta[:dim]
    t = np.diag(a) + np.diag(b[: dim - 1], 1) + np.diag(b[: dim - 1], -1)
    w, s = np.linalg.eigh(t)
    res = np.abs(b[dim - 1] * s[dim - 1, :])
    i = min(max(keep, 0), dim - 1)
    warm = q[:dim].T @ s[:, i]
    return Deflated(w, res, warm, used)
