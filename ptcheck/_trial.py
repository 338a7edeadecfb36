"""Perturbative trial states as polynomials in λ, with their residuals in closed form.

For a level n with Rayleigh–Schrödinger vectors ψ^(0..K) (intermediate
normalisation) the unnormalised trial state Φ(λ) = Σ_i λ^i ψ^(i) and the
centre c(λ) = E_K(λ) = Σ_{j≤K} λ^j E^(j) satisfy, by the RS equations,

    (H(λ) − c(λ)) Φ(λ) = Σ_{m=K+1}^{2K} λ^m R_m,
    R_{K+1} = V ψ^(K) − Σ_{j=1}^{K} E^(j) ψ^(K+1−j),
    R_m     = − Σ_{j=m−K}^{K} E^(j) ψ^(m−j)        (m ≥ K+2),

(orders ≤ K cancel exactly; derived here from the recursion in
:mod:`ptcheck.series`).  So after one mat-vec beyond the series and one Gram
matrix of the 2K+1 vectors, the Rayleigh quotient ρ(λ) and the residual
r(λ) = ‖(H − ρ)ψ‖ of the normalised state cost O(K²) per coupling, and the
residual about the centre obeys the monotone bound

    ‖(H − c)Φ‖ / ‖Φ‖ ≤ U(|λ|) = Σ_m |λ|^m ‖R_m‖     (‖Φ‖ ≥ 1).

Floating-point rounding is carried as explicit margins (see ``_margins``):
the bounds are rigorous for the matrices as stored, up to those margins.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .model import Model
from .series import rs_series

EPS = float(np.finfo(float).eps)


@dataclass(frozen=True)
class OperatorScales:
    """Rigorous spectral facts about ``H0`` and ``V`` used by every bound.

    Attributes
    ----------
    v_min, v_max : float
        Lower / upper bound of the spectrum of V (energy units).
    v_abs : float
        Bound on ``‖|V|‖`` (largest absolute row sum), for rounding margins.
    row_nnz : int
        Largest number of stored entries in a row of V.
    e_span : float
        ``max|E0|``: scale of H0 for rounding margins.
    source : str
        ``"eigvalsh"`` (dense, exact up to rounding) or ``"gershgorin"``.
    """

    v_min: float
    v_max: float
    v_abs: float
    row_nnz: int
    e_span: float
    source: str

    def h_scale(self, coupling: np.ndarray) -> np.ndarray:
        """Bound on ‖H(λ)‖, shape of ``coupling``."""
        return self.e_span + np.abs(coupling) * self.v_abs

    def shift_range(self, coupling: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Range of ``λ × spec(V)``: (lowest, highest), shape of ``coupling`` (Weyl)."""
        lam = np.asarray(coupling, dtype=float)
        a, b = lam * self.v_min, lam * self.v_max
        return np.minimum(a, b), np.maximum(a, b)


#: Dense models up to this size get the exact extreme eigenvalues of V.
_DENSE_EIG_LIMIT = 512


def operator_scales(model: Model) -> OperatorScales:
    """Spectral bounds of V: exact (dense eigvalsh) for small models, Gershgorin discs otherwise."""
    v = model.v
    if sp.issparse(v):
        a = abs(v)
        v_abs = float(np.max(np.asarray(a.sum(axis=1)).ravel(), initial=0.0))
        row_nnz = int(np.max(np.diff(v.indptr), initial=0))
        diag = np.real(v.diagonal())
        radius = np.asarray(a.sum(axis=1)).ravel() - np.abs(diag)
    else:
        a = np.abs(v)
        v_abs = float(np.max(a.sum(axis=1), initial=0.0))
        row_nnz = int(np.max(np.count_nonzero(v, axis=1), initial=0))
        diag = np.real(np.diag(v))
        radius = a.sum(axis=1) - np.abs(diag)
    e_span = float(np.max(np.abs(model.e0)))
    if model.n <= _DENSE_EIG_LIMIT:
        w = np.linalg.eigvalsh(v.toarray() if sp.issparse(v) else v)
        pad = 64 * EPS * model.n * max(v_abs, 1e-300)
        return OperatorScales(float(w[0]) - pad, float(w[-1]) + pad, v_abs, row_nnz, e_span, "eigvalsh")
    lo = float(np.min(diag - radius))
    hi = float(np.max(diag + radius))
    pad = 8 * EPS * max(v_abs, 1e-300) * max(row_nnz, 1)
    return OperatorScales(lo - pad, hi + pad, v_abs, row_nnz, e_span, "gershgorin")


class SeriesTrial:
    """RS trial state of one level to order K, with its residual polynomial.

    Parameters
    ----------
    model : Model
    level : int
        Work-basis index (already validated; must be non-degenerate).
    trial_order : int
        K >= 1, the order of the trial state (K + 1 mat-vecs in all).
    scales : OperatorScales

    Attributes
    ----------
    energy_coefficients : (K + 2,) ndarray
        E^(0..K+1) (the last one comes free with the extra mat-vec).
    mat_vecs : int
        Mat-vecs with V spent building the trial.
    """

    def __init__(self, model: Model, level: int, trial_order: int, scales: OperatorScales) -> None:
        k = int(trial_order)
        s = rs_series(model, level, k)
        psi = s.state_coefficients
        w = model.v @ psi[k]
        e = np.zeros(k + 2)
        e[: k + 1] = s.energy_coefficients
        e[k + 1] = float(np.real(w[level]))
        self.model, self.level, self.order, self.scales = model, level, k, scales
        self.series = s
        self.energy_coefficients = e
        self.mat_vecs = k + 1  # the series, then V ψ^(K)
        # residual vectors R_{K+1..2K} (rows), formed explicitly: no cancellation in their norms
        coef = np.zeros((k, k + 1))
        for row, m in enumerate(range(k + 1, 2 * k + 1)):
            for j in range(max(1, m - k), k + 1):
                coef[row, m - j] = -e[j]
        resid = coef @ psi
        resid[0] = resid[0] + w
        # Gram of X = [Ψ, (H0 − E0_n) Ψ, V ψ^(K)]: by the RS equations V ψ^(i) (i < K) lies in span X up
        # to rounding, so H x for x in span Ψ does too (Ritz residuals without cancellation; the shift by
        # E0_n keeps a constant added to H0 out of the rounding)
        h0psi = (model.e0 - model.e0[level])[None, :] * psi
        blocks = (psi, h0psi, w[None, :])
        self._g_x = np.block([[a.conj() @ b.T for b in blocks] for a in blocks])  # complex for complex models
        del h0psi
        self._x_norms = np.sqrt(np.clip(np.real(np.diag(self._g_x)), 0.0, None))
        self._g_pp = self._g_x[: k + 1, : k + 1]
        self._g_pp_real = np.real(self._g_pp)  # enough for real coefficient vectors (powers of λ)
        self._gamma_n = model.n * EPS / (1.0 - model.n * EPS)  # worst-case error of an N-term dot product
        self._g_pr = np.real(psi.conj() @ resid.T)
        self._g_rr = np.real(resid.conj() @ resid.T)
        self.psi_norms = np.sqrt(np.clip(np.diag(self._g_pp_real), 0.0, None))
        self.resid_norms = np.sqrt(np.clip(np.diag(self._g_rr), 0.0, None))
        self._eps_m = self._margins()
        # V ψ^(i) in X-coordinates: −(H0 − E0_n) ψ^(i+1) + Σ_j E^(j) ψ^(i+1−j) for i < K, and V ψ^(K)
        j = k + 1
        vx = np.zeros((2 * j + 1, j))
        for i in range(k):
            vx[j + i + 1, i] -= 1.0
            for jj in range(1, i + 2):
                vx[i + 1 - jj, i] += e[jj]
        vx[2 * j, k] = 1.0
        self._v_in_x = vx

    # ------------------------------------------------------------ polynomials in s = |λ|
    @property
    def resid_powers(self) -> np.ndarray:
        """Powers m of the residual terms R_m, shape (K,) (K+1..2K)."""
        k = self.order
        return np.arange(k + 1, 2 * k + 1)

    def _margins(self) -> np.ndarray:
        """Rounding margin of the residual coefficient of λ^m, m = 0..2K (shape (2K+1,)).

        A mat-vec with V has entrywise error ≤ γ |V||x|, γ = (nnz per row + 2) ε,
        and each linear combination adds ≤ (terms + 2) ε of its terms' sizes
        (Higham, Accuracy and Stability of Numerical Algorithms, 2002, §3.1 and §3.5).
        """
        k, sc = self.order, self.scales
        e = np.abs(self.energy_coefficients)
        pn = self.psi_norms
        gap_scale = float(np.max(np.abs(self.model.e0 - self.model.e0[self.level])))
        out = np.zeros(2 * k + 2)
        gamma = (sc.row_nnz + k + 4) * EPS
        for m in range(1, 2 * k + 2):
            t = sc.v_abs * (pn[m - 1] if m - 1 <= k else 0.0)
            t += sum(e[j] * pn[m - j] for j in range(max(1, m - k), min(k, m) + 1))
            if m <= k:
                t += gap_scale * pn[m]
            out[m] = gamma * t
        return out

    def residual_bound_coefficients(self) -> np.ndarray:
        """Coefficients u_m of U(s) = Σ_m u_m s^m (m = 0..2K+1), monotone in s >= 0."""
        k = self.order
        u = self._eps_m.copy()
        u[k + 1 : 2 * k + 1] += self.resid_norms
        return u

    def residual_bound(self, s: np.ndarray) -> np.ndarray:
        """U(|λ|): bound on ‖(H(λ) − E_K(λ)) Φ‖ / ‖Φ‖ for every λ with |λ| ≤ s."""
        return np.polynomial.polynomial.polyval(np.abs(np.asarray(s, dtype=float)), self.residual_bound_coefficients())

    def centre(self, couplings: np.ndarray) -> np.ndarray:
        """E_K(λ), shape of ``couplings``."""
        return np.polynomial.polynomial.polyval(np.asarray(couplings, dtype=float), self.energy_coefficients[: self.order + 1])

    # ------------------------------------------------------------ per coupling
    def evaluate(self, couplings: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Rayleigh quotient, residual and rounding slack of ρ at ``couplings`` (1-D).

        Returns
        -------
        rho, r, d_rho : (C,) ndarrays
            ρ(λ), an upper bound on ‖(H − ρ)ψ‖ for the normalised trial ψ, and a
            bound on the rounding error of ρ (energy units).
        """
        lam = np.asarray(couplings, dtype=float)
        k = self.order
        a = lam[:, None] ** np.arange(k + 1)[None, :]
        pw = self.resid_powers
        b = lam[:, None] ** pw[None, :]
        phi2 = np.einsum("ci,ij,cj->c", a, self._g_pp_real, a)
        cross = np.einsum("ci,ij,cj->c", a, self._g_pr, b)
        p2 = np.einsum("ci,ij,cj->c", b, self._g_rr, b)
        s = np.abs(lam)
        u0 = (s[:, None] ** pw[None, :]) @ self.resid_norms
        eps_poly = np.polynomial.polynomial.polyval(s, self._eps_m)
        phi_abs = (s[:, None] ** np.arange(k + 1)[None, :]) @ self.psi_norms
        nterm = 4 * (2 * k + 2) * EPS + self._gamma_n
        phi2 = np.maximum(phi2, 1.0)  # ⟨n|Φ⟩ = 1 exactly, so ‖Φ‖ ≥ 1
        c = self.centre(lam)
        rho_shift = cross / phi2
        d_rho = (eps_poly * np.sqrt(phi2) + nterm * phi_abs * u0) / phi2
        d_rho = d_rho + 4 * EPS * np.abs(c)
        rc2_up = (np.maximum(p2, 0.0) + nterm * u0**2) / phi2
        rc_up = np.minimum(np.sqrt(rc2_up), u0 / np.sqrt(phi2)) + eps_poly / np.sqrt(phi2)
        dev_lo = np.maximum(np.abs(rho_shift) - d_rho, 0.0)
        r = np.sqrt(np.maximum(rc_up**2 - dev_lo**2, 0.0))
        return c + rho_shift, r, d_rho

    def subspace(self, couplings: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Rayleigh–Ritz of H(λ) in span{ψ^(0..K)} at each coupling (no mat-vec).

        Returns
        -------
        ritz, r, d_ritz : (C, M) ndarrays
            Ritz values (ascending; the j-th is ≥ E_(j) by Cauchy interlacing),
            upper bounds on their residuals ‖(H − θ)x‖ (x normalised), and
            bounds on |θ − ⟨H⟩_x| from rounding (energy units).  Residuals are
            evaluated in the Gram matrix of X = [Ψ, H0 Ψ, V ψ^(K)], with the
            worst-case rounding of N-term dot products and the rounding residuals
            of the RS equations added.
        """
        lam = np.asarray(couplings, dtype=float)
        j = self.order + 1
        b = self._g_pp
        sv, u = np.linalg.eigh(b)
        keep = sv > 1e-12 * sv[-1]
        t = u[:, keep] / np.sqrt(sv[keep])  # Ψ-coordinates of an orthonormal basis of span Ψ
        a0 = self._g_x[:j, j : 2 * j]
        a1 = self._g_x[:j] @ self._v_in_x
        a0, a1 = (a0 + a0.conj().T) / 2, (a1 + a1.conj().T) / 2
        th = t.conj().T
        h = (th @ a0 @ t)[None] + lam[:, None, None] * (th @ a1 @ t)[None]
        shifted, y = np.linalg.eigh(h)  # Ritz values of H − E0_n
        e_ref = self.energy_coefficients[0]
        ritz = shifted + e_ref
        a = np.swapaxes(t @ y, 1, 2)  # (C, M, K+1): Ψ-coordinates of the Ritz vectors
        # (H − θ) x in X-coordinates: (H0 − E0_n) part, λ V part (through V ψ^(i) in X), −(θ − E0_n) Ψ part
        z = (a @ self._v_in_x.T) * lam[:, None, None]
        z[:, :, :j] -= shifted[:, :, None] * a
        z[:, :, j : 2 * j] += a
        r2 = np.real(np.sum(z.conj() * (z @ self._g_x.T), axis=2))
        zabs = np.abs(z) @ self._x_norms
        gam = self._gamma_n + 4 * (3 * j) * EPS
        xn2 = np.real(np.sum(a.conj() * (a @ b.T), axis=2))
        aabs = np.abs(a) @ self.psi_norms
        xn2_lo = np.maximum(xn2 - gam * aabs**2, 1e-300)
        rs_round = np.abs(lam)[:, None] * (np.abs(a[:, :, : j - 1]) @ self._eps_m[1:j])  # RS-equation rounding
        r = (np.sqrt(np.maximum(r2, 0.0) + gam * zabs**2) + rs_round) / np.sqrt(xn2_lo)
        hs = (self.scales.h_scale(lam) - self.scales.e_span + float(np.max(np.abs(self.model.e0 - e_ref))))[:, None]
        d_ritz = (gam * aabs**2 * hs + aabs * rs_round + np.abs(shifted) * np.abs(xn2 - 1.0)) / xn2_lo
        d_ritz = d_ritz + 16 * EPS * hs * j + 4 * EPS * np.abs(ritz)
        return ritz, r, d_ritz

    def polynomials(self, direction: int) -> dict[str, np.ndarray]:
        """Coefficients (in s = |λ| >= 0 along ``direction``) of the pieces of ρ and r.

        ``D`` = ‖Φ‖², ``N1`` = ⟨Φ|(H − E_K)Φ⟩ (so ρ = E_K + N1/D), ``N2`` =
        ‖(H − E_K)Φ‖² (so r² ≤ N2/D), ``E`` the energy series E^(0..K) d^j, and
        the norm sums ``U0`` = Σ ‖R_m‖ s^m, ``PHI`` = Σ ‖ψ^(i)‖ s^i (for rounding margins).
        """
        k, d = self.order, float(direction)
        ip = np.arange(k + 1)
        pw = self.resid_powers

        def quad(g: np.ndarray, pa: np.ndarray, pb: np.ndarray) -> np.ndarray:
            out = np.zeros(int(pa.max() + pb.max()) + 1)
            tot = pa[:, None] + pb[None, :]
            np.add.at(out, tot.ravel(), (g * d**tot).ravel())
            return out

        u0 = np.zeros(2 * k + 1)
        u0[pw] = self.resid_norms
        return {
            "D": quad(self._g_pp_real, ip, ip),
            "N1": quad(self._g_pr, ip, pw),
            "N2": quad(self._g_rr, pw, pw),
            "E": self.energy_coefficients[: k + 1] * d**ip,
            "U0": u0,
            "PHI": self.psi_norms.copy(),
        }

    def best_vector(self, coupling: float) -> np.ndarray:
        """Normalised Ritz vector of span{ψ^(0..K)} that stands for the level at one coupling, shape (N,).

        The lowest Ritz vector for the ground level; otherwise the one overlapping the series state most.
        """
        lam = float(coupling)
        b = self._g_pp
        sv, u = np.linalg.eigh(b)
        keep = sv > 1e-12 * sv[-1]
        t = u[:, keep] / np.sqrt(sv[keep])
        j = self.order + 1
        a0 = self._g_x[:j, j : 2 * j]
        a1 = self._g_x[:j] @ self._v_in_x
        h = t.conj().T @ ((a0 + a0.conj().T) / 2 + lam * (a1 + a1.conj().T) / 2) @ t
        _, y = np.linalg.eigh(h)
        coords = t @ y  # (K+1, M)
        if self.level == 0:
            pick = 0
        else:
            p = lam ** np.arange(j)
            pick = int(np.argmax(np.abs(coords.conj().T @ (b @ p))))
        x = coords[:, pick] @ self.series.state_coefficients
        return x / np.linalg.norm(x)

    def vector(self, coupling: float) -> np.ndarray:
        """Normalised trial state at one coupling, shape (N,)."""
        return np.asarray(self.series.state(float(coupling), self.order))
