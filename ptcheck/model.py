"""The model ``H(λ) = H0 + λ V``: validation, symmetry sectors, unperturbed basis, level labels.

All of ptcheck works in the *work basis*: the eigenbasis of ``H0`` sorted by
unperturbed energy (level 0 = lowest), organised in **symmetry sectors**
(subspaces that ``H0 + λV`` leaves invariant for every λ; see
:mod:`ptcheck.sectors`).  Inside a group of exactly degenerate unperturbed
levels *of one sector* the work basis is rotated to the "good" states that
diagonalise ``V`` in the group (sorted by their first-order shift), so that
"level n" names one analytic branch of the exact spectrum; a group too large
to rotate cheaply keeps the user's states and the degenerate treatment finds
its good states (see the Notes of :class:`Model`).  Levels of
different sectors never mix: equal unperturbed energies in different sectors
are not a degeneracy (``Model.symmetry_degeneracies`` lists them).  The
transform back to the user's basis is kept (:meth:`Model.to_user_basis`).
"""

from __future__ import annotations

import html
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _validation as val
from . import sectors as sec
from ._labels import LevelNames, hashable
from .sectors import Sector

__all__ = ["Model", "MultiCouplingError", "DENSE_LIMIT", "MAX_COUPLINGS", "MAX_GROUP_ROTATION", "MAX_SPARSE_GROUP_ROTATION",
           "coupling_display", "physical_coupling_text"]

#: Largest basis for which ptcheck will build and diagonalise a dense matrix
#: (a dense complex 6000 x 6000 matrix is 0.6 GB; eigh takes minutes on 2 cores).
DENSE_LIMIT = 6000

#: Largest exactly degenerate group (inside one sector) that is rotated to
#: first-order good states when ``V`` is dense; levels in larger groups that V
#: mixes are reported as ambiguous.
MAX_GROUP_ROTATION = 256

#: The same limit when ``V`` is sparse.  Rotating a group of g states makes
#: each of its rows (and columns) a combination of g rows of V: up to g times
#: more stored entries there (a 2^18-state Ising chain: 4.7 M -> 7.0 M), which
#: every later product with V pays.  Larger groups stay on the user's states;
#: the degenerate treatment finds their good states itself.
MAX_SPARSE_GROUP_ROTATION = 32

#: Default degeneracy tolerance relative to the span of the unperturbed spectrum.
DEGENERACY_RTOL = 1e-9

#: Most couplings ``λ_i`` of one model (the multivariate series has
#: C(K + m, m) coefficients: m is kept small).
MAX_COUPLINGS = 8


class Model:
    """A perturbed Hamiltonian ``H(λ) = H0 + λ V``, or ``H0 + Σ_i λ_i V_i`` with several couplings.

    Parameters
    ----------
    h0 : (N, N) array_like, scipy.sparse matrix or qutip.Qobj
        Unperturbed Hamiltonian (Hermitian).  Energies are in the user's units;
        every energy ptcheck reports is in the same units (ħ = 1).
    v : (N, N) array_like, scipy.sparse matrix or qutip.Qobj, or a list of them
        Perturbation (Hermitian).  The coupling λ is dimensionless.  A list
        (or tuple) of matrices, or an (m, N, N) array, gives a model with m
        couplings ``H0 + Σ_i λ_i V_i`` (a nested list of numbers is one
        matrix).  Its sectors come from the union of the couplings' graphs,
        declared conserved operators must commute with every ``V_i``, and its
        work basis inside a degenerate group is that of a generic combination
        of the ``V_i``; functions of one coupling need a direction first
        (:meth:`along`); :mod:`ptcheck.multiseries`, :mod:`ptcheck.region`
        and :mod:`ptcheck.multiexact` take it as it is.
    labels : sequence of hashable, length N, optional
        Names of the unperturbed states.  If ``h0`` is diagonal they name its
        basis states in the order given; otherwise they name the eigenstates
        of ``h0`` in ascending energy.
    name : str, optional
        Name used in reports and figure captions.
    dims : sequence of int, optional
        Subsystem dimensions of a product basis (product must equal N).  If
        ``labels`` is not given, states are labelled by their quantum numbers,
        e.g. ``(1, 0)`` (made on demand from indices).  Taken from a ``Qobj``'s
        dims when not given.
    hermitian_rtol : float, default 1e-10
        Largest allowed ``|A[i,j] - conj(A[j,i])|`` relative to the larger of
        ``|A[i,j]|`` and ``|A[j,i]|`` (each pair on its own scale), beyond
        rounding noise (see :func:`ptcheck._validation.check_hermitian`).
    degeneracy_tol : float, optional
        Unperturbed levels *of one sector* closer than this (energy units)
        count as exactly degenerate for the **perturbative** side (they form
        one group: a block, good states).  Default: ``1e-9 x`` the span of the
        unperturbed spectrum (max E0 − min E0; ``max|V|`` if the span is
        zero), and never less than the round-off of the unperturbed energies
        (16 ulps of the largest ``|E0|``, plus 1000 ulps of the span when
        ``h0`` had to be diagonalised), so adding a constant to ``H0``
        changes nothing.  The tolerance never changes the
        matrices: levels inside a group keep their true energies and exact
        solves always use the true ``H0``; states are only rotated inside runs
        of levels that are equal to roundoff.
    conserved : sequence or mapping of operators, optional
        Conserved operators for symmetries the coupling graph cannot see (e.g.
        the spin-flip parity ``∏σx`` of an Ising chain): a sequence (named
        ``conserved[i]``) or a mapping ``name -> operator``; each like ``h0``
        (ndarray, scipy.sparse, qutip.Qobj), Hermitian and commuting with
        ``h0``, ``v`` and each other (checked, see
        :data:`ptcheck.sectors.COMMUTATOR_RTOL`; a clear error names the
        operator and the commutator size).  Sectors are their joint
        eigenspaces inside the components of the coupling graph.
    coupling_scale : float, optional
        Physical value of the coupling at λ = 1, for display (e.g. ``66.0``
        for g = 66 MHz).  Stored only; λ stays dimensionless everywhere.
    coupling_unit : str, optional
        Unit of ``coupling_scale`` (e.g. ``"MHz"``); needs ``coupling_scale``.
    coupling_name : str, optional
        Name of the physical coupling ``λ x coupling_scale`` (e.g. ``"g"``),
        for display beside λ ("λ* = 0.8 (g = 52.8 MHz)"); needs
        ``coupling_scale``.  See :meth:`physical_coupling`.
    names : sequence of str, optional
        Names of the couplings, one per ``V_i`` (e.g. ``("g", "E")``; default
        ``("λ",)`` for one coupling, ``("λ1", "λ2", ...)`` for several).
    truncated : bool or None, default None
        Whether the basis is a truncation of an infinite problem (a photon,
        level, charge or angular-momentum cut-off): ``True``; the complete,
        exact Hilbert space of a finite problem (spins, a two-level system, a
        finite lattice of fermions): ``False``; ``None`` when unknown.  The
        built-in builders set it.  It decides one thing: a series of a model
        known not to be truncated is never classified as asymptotic
        (:func:`ptcheck.convergence`), since a non-degenerate level of a
        finite matrix family is analytic in a disc of radius at least the Kato
        bound (Kato, *Perturbation Theory for Linear Operators*, 1966, ch. II).

    Attributes
    ----------
    n : int
        Basis size N.
    e0 : (N,) ndarray, read-only
        Unperturbed energies, ascending (energy units).
    energy_offset : float
        A constant subtracted internally (the lower median of the diagonal of
        ``h0``): exact solves and series work with ``e0_relative`` so that
        results keep the accuracy of the offset-free problem.
    e0_relative : (N,) ndarray, read-only
        ``e0 - energy_offset``, computed without the offset's rounding.
    v : (N, N) ndarray or scipy.sparse.csr_matrix
        The perturbation in the work basis.  Elements between different
        sectors are exactly zero (what the commutation check allowed as
        round-off is set to zero).  With several couplings, reading it raises
        :class:`MultiCouplingError` (a function of one coupling was given a
        model of several: see :meth:`along`).
    vs : tuple of (N, N) ndarray or csr_matrix
        Every coupling's perturbation in the work basis (``(v,)`` for one).
    n_couplings : int
    coupling_names : tuple of str
    norms_v : tuple of float
        Spectral norms ``‖V_i‖``.
    direction : (m,) ndarray or None
        For a ray model made by :meth:`along`: the direction ``d``.
    sectors : tuple of Sector
        The symmetry sectors (see :class:`ptcheck.sectors.Sector`).
    level_sectors : (N,) int ndarray, read-only
        Sector index of every level.
    degenerate_groups : tuple of tuple of int
        Groups (size >= 2) of exactly degenerate unperturbed levels inside one
        sector (within ``degeneracy_tol``).
    symmetry_degeneracies : tuple of tuple of int
        Runs of equal unperturbed energies (within ``degeneracy_tol``) that
        span several sectors: informative only, they never mix.
    ambiguous_levels : frozenset of int
        Levels whose user label cannot be attached to one perturbed level
        (a degenerate group of one sector in which ``V`` mixes the user's
        states).
    conserved_names : tuple of str
        Names of the declared conserved operators.
    parent_levels : tuple of int or None
        For a sub-model made by :meth:`restrict`: the parent's work index of
        each level; ``None`` for a model built from matrices.
    truncated : bool or None
        As given (see Parameters); sub-models and ray models keep it.

    Notes
    -----
    Work-basis order: ascending E0; among levels with equal E0 (to
    round-off), ascending sector index, then ascending first-order shift
    ⟨V⟩, then the order of the user's basis (so each exactly degenerate group
    of a sector is a run of consecutive indices).

    Good states are made eagerly only where they are cheap: a degenerate group
    that ``V`` mixes is rotated to its first-order good states when it has at
    most :data:`MAX_GROUP_ROTATION` (256) states and ``V`` is dense, or at
    most :data:`MAX_SPARSE_GROUP_ROTATION` (32) states and ``V`` is sparse
    (rotating g states makes each of their rows of ``V`` a combination of g
    rows: up to g times more stored entries, paid by every later product with
    ``V``).  A larger group stays on the user's states, unrotated: ``v`` is
    not diagonal inside it and ``v_diagonal()`` there is no first-order shift.
    Nothing else changes: the degenerate treatment
    (:func:`ptcheck.treatment.expansions`) finds the good states of every
    group from its effective Hamiltonian and gives level ``group[i]`` the i-th
    branch in ascending energy at small positive λ, for rotated and unrotated
    groups alike; labels of every mixed group are ambiguous
    (``ambiguous_levels``: the user's states went into combinations) and its
    levels are named by rank.  The model is never changed afterwards.

    Examples
    --------
    >>> import numpy as np
    >>> m = Model(np.diag([0.0, 1.0]), [[0, 0.1], [0.1, 0]], name="two-level")
    >>> m.e0
    array([0., 1.])
    >>> m.sectors
    (Sector(0, 'all levels', size=2),)
    """

    def __init__(
        self,
        h0: Any,
        v: Any,
        *,
        labels: Sequence[Hashable] | None = None,
        name: str | None = None,
        dims: Sequence[int] | None = None,
        hermitian_rtol: float = 1e-10,
        degeneracy_tol: float | None = None,
        conserved: Any = None,
        coupling_scale: float | None = None,
        coupling_unit: str | None = None,
        coupling_name: str | None = None,
        names: Sequence[str] | None = None,
        truncated: bool | None = None,
    ) -> None:
        trusted = self.__dict__.pop("_trusted_input", False)  # set by Model._trusted (built-in builders)
        truncated = val.check_optional_flag(truncated, "truncated")
        h0m, h0dims = val.as_operator(h0, "h0", max_dense=DENSE_LIMIT)
        hermitian_rtol = float(val.check_positive(hermitian_rtol, "hermitian_rtol"))
        several = _perturbation_list(v)
        if several is None:
            vm, _ = val.as_operator(v, "v", max_dense=DENSE_LIMIT)
            n = val.check_square_pair(h0m, vm)
            for nm, m in (("h0", h0m), ("v", vm)) if not trusted else ():
                val.check_finite(m, nm)
                val.check_hermitian(m, nm, hermitian_rtol, scale=max(val.max_abs(h0m), val.max_abs(vm)))
            user_vs: tuple = (vm,)
            vgraph = vm
        else:
            user_vs, vm, vgraph = _several_perturbations(h0m, several, hermitian_rtol)
            n = h0m.shape[0]
        coupling_names = _coupling_names(names, len(user_vs))
        if dims is None:
            dims = h0dims if (h0dims is not None and len(h0dims) > 1) else None
        if dims is not None:
            dims = tuple(val.check_int(d, "dims entry", minimum=1) for d in dims)
            if int(np.prod(dims)) != n:
                raise ValueError(f"dims {dims} multiply to {int(np.prod(dims))}, but the basis size is {n}")
        if labels is not None:
            labels = list(labels)
            if len(labels) != n:
                raise ValueError(f"labels must have one entry per basis state ({n}); got {len(labels)}")
            if len(set(map(hashable, labels))) != n:
                raise ValueError("labels must be distinct")
        if degeneracy_tol is not None:
            degeneracy_tol = float(val.check_positive(degeneracy_tol, "degeneracy_tol"))
        coupling_scale, coupling_unit, coupling_name = coupling_display(coupling_scale, coupling_unit, coupling_name)
        ops = sec.conserved_operators(conserved, n, hermitian_rtol, check=not trusted)

        # ---- unperturbed basis per graph component, offset removed ---------------------
        h0_diag = _is_diagonal(h0m)
        offset = sec.energy_offset(h0m)
        if not trusted:
            for vi in user_vs:
                sec.check_commutation(ops, h0m, vi, offset)
        comp = sec.components(h0m, vgraph, h0_diag)
        e0_rel, t0 = sec.unperturbed_basis(h0m, offset, comp, h0_diag, DENSE_LIMIT)
        span = float(np.ptp(e0_rel)) if n else 0.0
        biggest = float(np.max(np.abs(e0_rel + offset))) if n else 0.0
        eps = np.finfo(float).eps
        roundoff = sec.ROUNDOFF_ULPS * eps * biggest + (0.0 if h0_diag else 1e3 * eps * span)
        cid = sec.roundoff_clusters(e0_rel, roundoff)
        e0_rel = sec.snap_to_cluster_mean(e0_rel, cid)
        if degeneracy_tol is None:
            scale = span if span > 0 else val.max_abs(vm)
            degeneracy_tol = max(DEGENERACY_RTOL * scale, roundoff)
            if degeneracy_tol <= 0:
                degeneracy_tol = 1e-12

        # ---- conserved operators: quantum numbers, sectors ---------------------------
        cons = sec.diagonalise_conserved(ops, t0, comp, cid) if ops else sec.ConservedBasis(values=np.zeros((n, 0)))
        sector_of, info = sec.sector_ids(comp, cons.values, e0_rel)
        names = sec.sector_names(info, [nm for nm, _ in ops])
        # ---- V in the sector basis, good states inside (sector ∩ equal-energy run), order ----
        if sp.issparse(vm) and t0 is None and (cons.rotation is None or (cons.rep is not None and not cons.general)):
            v_work, perm, rot3, mixed_groups, big_groups = _sparse_work_v(vm, cons, sector_of, cid, hermitian_rtol, bool(ops))
        else:
            vpre = _zero_between_sectors(_v_in_basis(vm, t0, cons), sector_of)
            vpre, rot3, mixed_groups, big_groups = _good_states(vpre, sector_of, cid, hermitian_rtol)
            vdiag = np.real(np.asarray(vpre.diagonal() if sp.issparse(vpre) else np.diag(vpre)))
            vscale = val.max_abs(vpre)
            shift = np.round(vdiag / (1e-9 * vscale)) if vscale > 0 else np.zeros(n)
            perm = np.lexsort((np.arange(n), shift, sector_of, e0_rel))
            v_work = _permute(vpre, perm)
        inv = np.empty(n, dtype=np.int64)
        inv[perm] = np.arange(n)
        v_work = _realify(v_work)
        if sp.issparse(v_work):
            if not isinstance(v_work, sp.csr_matrix):
                v_work = sp.csr_matrix(v_work)
            v_work.eliminate_zeros()
            v_work.sort_indices()
        transform = _compose(t0, cons.rotation, rot3, perm, n)

        ambiguous_pos = np.zeros(n, dtype=bool)
        for idx in mixed_groups + big_groups:
            ambiguous_pos[idx] = True
        names_table = _level_names(
            labels, dims, n, h0_diag, t0, cons, perm, inv, e0_rel, ambiguous_pos, mixed_groups, big_groups, [nm for nm, _ in ops]
        )
        work_vs = None
        if len(user_vs) > 1:
            # every coupling's V in the work basis built for their generic combination
            work_vs = tuple(_in_work_basis(vi, transform, sector_of[perm]) for vi in user_vs)

        self._assign(
            name=str(name) if name is not None else "model",
            n=n,
            dims=dims,
            hermitian_rtol=hermitian_rtol,
            is_sparse=sp.issparse(vm),
            h0_is_diagonal=h0_diag,
            e0_relative=e0_rel[perm],
            energy_offset=offset,
            v=v_work,
            degeneracy_tol=degeneracy_tol,
            level_sectors=sector_of[perm],
            sector_info=tuple((q, nm) for (_, q), nm in zip(info, names)),
            ambiguous=ambiguous_pos[perm],
            names=names_table,
            transform=transform,
            conserved_names=tuple(nm for nm, _ in ops),
            coupling_scale=coupling_scale,
            coupling_unit=coupling_unit,
            coupling_name=coupling_name,
            parent_levels=None,
            vs=work_vs,
            coupling_names=coupling_names,
            truncated=truncated,
        )

    # ------------------------------------------------------------------ construction
    def _assign(
        self,
        *,
        name: str,
        n: int,
        dims: tuple | None,
        hermitian_rtol: float,
        is_sparse: bool,
        h0_is_diagonal: bool,
        e0_relative: np.ndarray,
        energy_offset: float,
        v: Any,
        degeneracy_tol: float,
        level_sectors: np.ndarray,
        sector_info: tuple,
        ambiguous: np.ndarray,
        names: LevelNames,
        transform: Any,
        conserved_names: tuple,
        coupling_scale: float | None,
        coupling_unit: str | None,
        parent_levels: tuple | None,
        e0: np.ndarray | None = None,
        coupling_name: str | None = None,
        vs: tuple | None = None,
        coupling_names: tuple[str, ...] = ("λ",),
        direction: np.ndarray | None = None,
        ray_levels: np.ndarray | None = None,
        truncated: bool | None = None,
    ) -> None:
        self.name = name
        self.truncated = truncated
        self.n = n
        self.dims = dims
        self.hermitian_rtol = hermitian_rtol
        self.is_sparse = is_sparse
        self.h0_is_diagonal = h0_is_diagonal
        e0_relative = np.ascontiguousarray(e0_relative, dtype=float)
        e0_relative.setflags(write=False)
        self.e0_relative = e0_relative
        self.energy_offset = float(energy_offset)
        if e0 is None:
            e0 = e0_relative + self.energy_offset
        e0 = np.ascontiguousarray(e0, dtype=float)
        e0.setflags(write=False)
        self.e0 = e0
        self._v = v
        self._vs = vs
        self.coupling_names = tuple(coupling_names)
        self.direction = direction
        self._ray_levels = ray_levels
        self._norms_v: tuple[float, ...] | None = None
        self.degeneracy_tol = float(degeneracy_tol)
        level_sectors = np.ascontiguousarray(level_sectors, dtype=np.int64)
        level_sectors.setflags(write=False)
        self.level_sectors = level_sectors
        self._sector_info = sector_info
        self._ambiguous_mask = np.asarray(ambiguous, dtype=bool)
        self._ambiguous: frozenset | None = None
        self._names = names
        self._labels_tuple: tuple | None = None
        self._transform = transform
        self.conserved_names = conserved_names
        self.coupling_scale = coupling_scale
        self.coupling_unit = coupling_unit
        self.coupling_name = coupling_name
        self.parent_levels = parent_levels
        self._group_id = _group_ids(self.e0_relative, self.level_sectors, self.degeneracy_tol)
        self._groups: tuple | None = None
        self._group_cache: dict[int, tuple[int, ...]] = {}
        self._norm_v: float | None = None
        self._sectors: tuple[Sector, ...] | None = None
        self._symmetry_degeneracies: tuple | None = None
        self._restricted: dict[int, Model] = {}
        self._offset_free_model: tuple[Model, float] | None = None

    @classmethod
    def _trusted(cls, h0: Any, v: Any, **kwargs: Any) -> Model:
        """A model from matrices that a built-in builder made finite, Hermitian and with commuting declared
        operators by construction: those input checks are skipped (private; the rest is as ``Model(...)``)."""
        obj = object.__new__(cls)
        obj._trusted_input = True
        obj.__init__(h0, v, **kwargs)
        return obj

    @classmethod
    def _from_parts(cls, **parts: Any) -> Model:
        """A model from already validated work-basis parts (no checks; private)."""
        obj = object.__new__(cls)
        obj._assign(**parts)
        return obj

    # ------------------------------------------------------------------ basics
    def __repr__(self) -> str:
        kind = "sparse" if self.is_sparse else "dense"
        deg = f", {len(self.degenerate_groups)} degenerate group(s)" if self.degenerate_groups else ""
        cpl = f", couplings ({', '.join(self.coupling_names)})" if self.n_couplings > 1 else ""
        return f"Model({self.name!r}, N={self.n}, {kind}{cpl}, {self._sector_summary()}{deg})"

    def _sector_summary(self) -> str:
        k = len(self._sector_info)
        if k == 1:
            return "1 sector"
        sizes = np.bincount(self.level_sectors, minlength=k)
        if k <= 4:
            return f"{k} sectors (" + ", ".join(f"{nm}: {int(s)}" for (_, nm), s in zip(self._sector_info, sizes)) + ")"
        return f"{k} sectors, sizes {int(sizes.min())}–{int(sizes.max())}"

    def to_dict(self) -> dict:
        """JSON-safe summary: size, storage, offset, coupling scale, sectors (count, sizes, names)."""
        k = len(self._sector_info)
        sizes = np.bincount(self.level_sectors, minlength=k)
        listed = min(k, 1000)
        return {
            "name": self.name,
            "n": int(self.n),
            "dims": list(self.dims) if self.dims is not None else None,
            "storage": "sparse" if self.is_sparse else "dense",
            "energy_offset": float(self.energy_offset),
            "degeneracy_tol": float(self.degeneracy_tol),
            "conserved": list(self.conserved_names),
            "coupling_scale": self.coupling_scale,
            "coupling_unit": self.coupling_unit,
            "coupling_name": self.coupling_name,
            "couplings": list(self.coupling_names),
            "direction": None if self.direction is None else [float(x) for x in self.direction],
            "truncated": self.truncated,
            "sectors": {
                "count": int(k),
                "listed": int(listed),
                "names": [nm for _, nm in self._sector_info[:listed]],
                "sizes": [int(s) for s in sizes[:listed]],
            },
            "degenerate_groups": len(self.degenerate_groups),
            "symmetry_degeneracies": len(self.symmetry_degeneracies),
            "ambiguous_levels": len(self.ambiguous_levels),
        }

    def _repr_html_(self) -> str:
        k = len(self._sector_info)
        sizes = np.bincount(self.level_sectors, minlength=k)
        rows = "".join(
            f"<tr><td>{i}</td><td>{html.escape(nm)}</td><td>{int(s)}</td></tr>"
            for i, ((_, nm), s) in enumerate(zip(self._sector_info[:20], sizes[:20]))
        )
        more = f"<p>… {k - 20} more sectors</p>" if k > 20 else ""
        return (
            f"<b>Model</b> {html.escape(self.name)}: N = {self.n}, {'sparse' if self.is_sparse else 'dense'}, "
            f"{len(self.degenerate_groups)} degenerate group(s)"
            f"<table><tr><th>sector</th><th>name</th><th>levels</th></tr>{rows}</table>{more}"
        )

    @property
    def dtype(self) -> np.dtype:
        """Data type of the work-basis perturbation(s) (float64 or complex128)."""
        return np.result_type(*(vi.dtype for vi in self.vs))

    # ------------------------------------------------------------------ couplings
    @property
    def v(self) -> np.ndarray | sp.csr_matrix:
        """The perturbation in the work basis, shape (N, N) (one-coupling models only).

        Raises
        ------
        MultiCouplingError
            The model has several couplings: a function of one coupling needs
            a direction first, ``model.along(direction)``.
        """
        if self._vs is not None:
            raise MultiCouplingError(self.name, self.coupling_names)
        return self._v

    @property
    def vs(self) -> tuple:
        """The perturbations ``V_i`` in the work basis, one (N, N) matrix per coupling."""
        return self._vs if self._vs is not None else (self._v,)

    @property
    def n_couplings(self) -> int:
        """Number of couplings m of ``H0 + Σ_i λ_i V_i`` (1 for ``Model(h0, v)``)."""
        return len(self.coupling_names)

    @property
    def norms_v(self) -> tuple[float, ...]:
        """Spectral norms ``‖V_i‖`` (energy units), one per coupling."""
        if self._norms_v is None:
            self._norms_v = tuple(_spectral_norm(vi) for vi in self.vs)
        return self._norms_v

    def along(self, direction: Any) -> Model:
        """The one-coupling model ``H0 + t Σ_i d_i V_i`` on the ray of ``direction``.

        Same work basis, sectors, labels and degenerate groups as this model,
        except inside exactly degenerate groups: their states are rotated to the
        first-order good states of the ray's perturbation (and sorted by their
        first-order shift), as :class:`Model` does for one coupling (with the
        same size limits).  Labels of
        levels whose group any ``V_i`` mixes stay ambiguous.

        Parameters
        ----------
        direction : (m,) array_like
            Real, finite, not all zero; used as given (not normalised): the
            point ``t`` on the ray is the coupling vector ``t d``.

        Returns
        -------
        Model
            One coupling (named ``"t"``); ``direction`` records ``d``.

        Examples
        --------
        >>> import numpy as np
        >>> m = Model(np.diag([0.0, 1.0]), [[[0, .1], [.1, 0]], [[.2, 0], [0, -.2]]], names=("g", "E"))
        >>> m.along((1.0, 0.5)).v
        array([[ 0.1,  0.1],
               [ 0.1, -0.1]])
        """
        d = val.as_direction(direction, self.n_couplings, self.coupling_names)
        vs = self.vs
        if sp.issparse(vs[0]):
            v = sp.csr_matrix(vs[0].shape, dtype=self.dtype)
            for di, vi in zip(d, vs):
                if di != 0:
                    v = v + di * vi
            v = sp.csr_matrix(v)
            v.sum_duplicates()
        else:
            v = np.zeros(vs[0].shape, dtype=self.dtype)
            for di, vi in zip(d, vs):
                if di != 0:
                    v += di * vi
        v, perm, rot = _regood(v, self.degenerate_groups, self._ambiguous_mask)
        names = self._names
        if perm is not None:
            names = names.restrict(perm)
            names.ranks = self._names.ranks  # ranks are positions: they do not move
        transform = self._transform
        if perm is not None:
            transform = transform[:, perm] if not sp.issparse(transform) else sp.csc_matrix(transform)[:, perm].tocsr()
        if rot is not None:
            transform = (transform @ rot).tocsr() if sp.issparse(transform) else np.asarray(transform @ rot)
        parts = self._parts()
        parts.update(
            name=f"{self.name} along ({', '.join(f'{x:.6g}' for x in d)})",
            v=_realify(v),
            names=names,
            transform=transform,
            vs=None,
            coupling_names=("t",),
            direction=_frozen(d),
            coupling_scale=None,
            coupling_unit=None,
            coupling_name=None,
            ray_levels=perm if perm is not None else np.arange(self.n),
        )
        return Model._from_parts(**parts)

    def _ray_level(self, level: int) -> int:
        """Work index on this ray model of the parent model's ``level`` (private; rays only).

        Levels of unmixed degenerate groups keep their state (the ray sorts them
        by its own first-order shift); elsewhere the index is unchanged.
        """
        if self._ray_levels is None:
            return int(level)
        return int(np.flatnonzero(self._ray_levels == level)[0])

    def _parts(self) -> dict:
        """The keyword arguments of :meth:`_assign` that rebuild this model (private)."""
        return dict(
            name=self.name,
            n=self.n,
            dims=self.dims,
            hermitian_rtol=self.hermitian_rtol,
            is_sparse=self.is_sparse,
            h0_is_diagonal=self.h0_is_diagonal,
            e0_relative=self.e0_relative,
            energy_offset=self.energy_offset,
            e0=self.e0,
            v=self._v,
            degeneracy_tol=self.degeneracy_tol,
            level_sectors=self.level_sectors,
            sector_info=self._sector_info,
            ambiguous=self._ambiguous_mask,
            names=self._names,
            transform=self._transform,
            conserved_names=self.conserved_names,
            coupling_scale=self.coupling_scale,
            coupling_unit=self.coupling_unit,
            coupling_name=self.coupling_name,
            parent_levels=self.parent_levels,
            vs=self._vs,
            coupling_names=self.coupling_names,
            direction=self.direction,
            ray_levels=self._ray_levels,
            truncated=self.truncated,
        )

    @property
    def labels(self) -> tuple:
        """Label of each level in work order (``None`` where no label is known); built on first use."""
        if self._labels_tuple is None:
            self._labels_tuple = self._names.all_raw()
        return self._labels_tuple

    @property
    def norm_v(self) -> float:
        """Spectral norm ``‖V‖`` (largest |eigenvalue| of V), energy units."""
        if self._norm_v is None:
            self._norm_v = _spectral_norm(self.v)
        return self._norm_v

    def physical_coupling(self, coupling: float) -> str:
        """The physical coupling at λ, for display: ``"g = 52.8 MHz"`` (``""`` without ``coupling_scale``).

        Examples
        --------
        >>> m = Model(np.diag([0.0, 1.0]), [[0, 1], [1, 0]], coupling_scale=66.0, coupling_unit="MHz", coupling_name="g")
        >>> m.physical_coupling(0.8)
        'g = 52.8 MHz'
        """
        return physical_coupling_text(coupling, self.coupling_scale, self.coupling_unit, self.coupling_name)

    def hamiltonian(self, coupling: float) -> np.ndarray | sp.csr_matrix:
        """``H0 + λ V`` in the work basis, shape (N, N), same storage as ``v``."""
        lam = val.as_coupling(coupling)
        if sp.issparse(self.v):
            return (sp.diags(self.e0) + lam * self.v).tocsr()
        h = lam * self.v
        h[np.diag_indices(self.n)] += self.e0
        return h

    def v_element(self, i: int, j: int) -> complex | float:
        """Work-basis matrix element ``V_ij``."""
        return self.v[i, j]

    def v_diagonal(self) -> np.ndarray:
        """Diagonal of V in the work basis, shape (N,) (real)."""
        d = self.v.diagonal() if sp.issparse(self.v) else np.diag(self.v)
        return np.real(np.asarray(d))

    def to_user_basis(self, states: np.ndarray) -> np.ndarray:
        """Map work-basis vectors (shape ``(..., N)``) to the user's basis.

        For a sub-model (:meth:`restrict`) the result lives in the parent's
        user basis (last axis: the parent's N).
        """
        s = np.asarray(states)
        if s.shape[-1] != self.n:
            raise ValueError(f"states must have last axis of length {self.n}; got shape {s.shape}")
        t = self._transform
        flat = s.reshape(-1, self.n)
        out = (t @ flat.T).T
        return np.asarray(out).reshape(s.shape[:-1] + (t.shape[0],))

    # ------------------------------------------------------------------ levels
    def level_index(self, key: Any) -> int:
        """Work-basis index of a level given by energy rank (int) or label.

        Raises
        ------
        AmbiguousLevelError
            The label belongs to a degenerate group mixed by ``V``, or to a
            user state that a declared conserved operator combines with others.
        ValueError
            Unknown label or rank out of range.
        """
        if isinstance(key, (int, np.integer)) and not isinstance(key, bool):
            k = int(key)
            if not 0 <= k < self.n:
                raise ValueError(f"level must be in 0..{self.n - 1}; got {k}")
            return k
        return self._names.index(key, self.name, self.n)

    def label(self, level: int) -> str:
        """Printable name of a level: its label if it has one, else ``"n=<rank>"``.

        A level made of two user states by a declared involution is named
        after both, e.g. ``"|0,0,0⟩+|1,1,1⟩"``.
        """
        return self._names.text(level)

    @property
    def ambiguous_levels(self) -> frozenset:
        """Levels whose user label cannot be attached to one perturbed level (see class docstring)."""
        if self._ambiguous is None:
            self._ambiguous = frozenset(int(i) for i in np.flatnonzero(self._ambiguous_mask))
        return self._ambiguous

    @property
    def degenerate_groups(self) -> tuple[tuple[int, ...], ...]:
        """Groups (size >= 2) of exactly degenerate levels inside one sector, sorted by first level."""
        if self._groups is None:
            gid = self._group_id
            if not np.any(gid >= 0):
                self._groups = ()
            else:
                order = np.argsort(gid, kind="stable")
                order = order[gid[order] >= 0]
                bounds = np.flatnonzero(np.diff(gid[order])) + 1
                parts = np.split(order, bounds)
                self._groups = tuple(tuple(int(x) for x in p) for p in sorted(parts, key=lambda p: p[0]))
        return self._groups

    def degenerate_group_of(self, level: int) -> tuple[int, ...] | None:
        """The exactly degenerate group (inside the level's sector) containing ``level``, or ``None``."""
        k = int(self._group_id[level])
        if k < 0:
            return None
        if k not in self._group_cache:
            self._group_cache[k] = tuple(int(x) for x in np.flatnonzero(self._group_id == k))
        return self._group_cache[k]

    # ------------------------------------------------------------------ sectors
    @property
    def sectors(self) -> tuple[Sector, ...]:
        """The symmetry sectors, ordered as documented in :class:`ptcheck.sectors.Sector`."""
        if self._sectors is None:
            k = len(self._sector_info)
            order = np.argsort(self.level_sectors, kind="stable")
            bounds = np.searchsorted(self.level_sectors[order], np.arange(k + 1))
            out = []
            for i, (q, nm) in enumerate(self._sector_info):
                lv = order[bounds[i] : bounds[i + 1]]
                out.append(Sector(index=i, levels=tuple(int(x) for x in lv), quantum_numbers=q, name=nm))
            self._sectors = tuple(out)
        return self._sectors

    def sector_of(self, level: Any) -> int:
        """Sector index of a level (energy rank or label)."""
        return int(self.level_sectors[self.level_index(level)])

    @property
    def symmetry_degeneracies(self) -> tuple[tuple[int, ...], ...]:
        """Runs of equal E0 (within ``degeneracy_tol``) spanning several sectors (information only)."""
        if self._symmetry_degeneracies is None:
            out = []
            for run in _runs(self.e0_relative, self.degeneracy_tol):
                if np.unique(self.level_sectors[run]).size > 1:
                    out.append(tuple(int(i) for i in run))
            self._symmetry_degeneracies = tuple(out)
        return self._symmetry_degeneracies

    def restrict(self, sector: int) -> Model:
        """The sub-model of one sector (cached), already in the work basis.

        Its ``e0`` and ``v`` are the parent's sub-array / sub-block, labels and
        degenerate groups carry over, ``energy_offset`` and ``degeneracy_tol``
        are the parent's, and ``parent_levels`` maps its indices to the
        parent's work indices.

        Parameters
        ----------
        sector : int
            Sector index (``model.sectors[i].index``).
        """
        k = val.check_int(sector, "sector", minimum=0, maximum=len(self._sector_info) - 1)
        if k not in self._restricted:
            levels = np.flatnonzero(self.level_sectors == k)
            self._restricted[k] = self._subset(levels, k)
        return self._restricted[k]

    def _subset(self, levels: np.ndarray, k: int) -> Model:
        sub_vs = tuple(_sub_operator(vi, levels) for vi in self.vs)
        sub_v = sub_vs[0] if self._vs is None else None
        t = self._transform
        q, nm = self._sector_info[k]
        base = self.parent_levels
        parent = tuple(int(x) for x in levels) if base is None else tuple(base[int(x)] for x in levels)
        sub = Model._from_parts(
            name=f"{self.name} [{nm}]" if len(self._sector_info) > 1 else self.name,
            n=int(levels.size),
            dims=None,
            hermitian_rtol=self.hermitian_rtol,
            is_sparse=self.is_sparse,
            h0_is_diagonal=self.h0_is_diagonal,
            e0_relative=self.e0_relative[levels],
            energy_offset=self.energy_offset,
            e0=self.e0[levels],
            v=sub_v,
            degeneracy_tol=self.degeneracy_tol,
            level_sectors=np.zeros(levels.size, dtype=np.int64),
            sector_info=((q, nm),),
            ambiguous=self._ambiguous_mask[levels],
            names=self._names.restrict(levels),
            transform=t[:, levels] if not sp.issparse(t) else t.tocsc()[:, levels].tocsr(),
            conserved_names=self.conserved_names,
            coupling_scale=self.coupling_scale,
            coupling_unit=self.coupling_unit,
            coupling_name=self.coupling_name,
            parent_levels=parent,
            vs=None if self._vs is None else sub_vs,
            coupling_names=self.coupling_names,
            direction=self.direction,
            truncated=self.truncated,
        )
        return sub

    def _offset_free(self) -> tuple[Model, float]:
        """This model with its own energy centre removed (exact solvers work on it; private, cached).

        Returns ``(model, c)``: a copy whose ``e0`` is ``e0_relative − c``,
        with ``c`` the lower median of ``e0_relative`` (for a sub-model: of its
        sector, so that a sector far from the whole model's offset keeps the
        accuracy of its own energies).  Absolute energy = energy of the copy
        + ``c`` + ``energy_offset``.
        """
        if self._offset_free_model is None:
            k = (self.n - 1) // 2
            c = float(np.partition(self.e0_relative, k)[k]) if self.n else 0.0
            e0 = np.ascontiguousarray(self.e0_relative - c)
            e0.setflags(write=False)
            m = object.__new__(Model)
            m.__dict__.update(self.__dict__)
            m.e0 = e0
            m.e0_relative = e0
            m.energy_offset = 0.0
            m._restricted = {}
            m._offset_free_model = None
            self._offset_free_model = (m, c)
        return self._offset_free_model

    # ------------------------------------------------------------------ series
    def series(self, level: Any, order: int, **kwargs: Any):
        """Rayleigh–Schrödinger series of one level; see :func:`ptcheck.series.rs_series`."""
        from .series import rs_series

        return rs_series(self, level, order, **kwargs)

    def block_series(self, levels: Any, order: int, **kwargs: Any):
        """Block (quasi-degenerate) series; see :func:`ptcheck.blocks.block_series`."""
        from .blocks import block_series

        return block_series(self, levels, order, **kwargs)


# ---------------------------------------------------------------------- helpers
#: Weights of the generic combination Σ w_i V_i that fixes the work basis of a
#: model with several couplings (good states, order of equal energies): powers
#: of 1/ρ, ρ the plastic number, so that no two couplings cancel by accident.
_GENERIC_WEIGHT = 0.7548776662466927


class MultiCouplingError(ValueError):
    """A model with several couplings was given to a function of one coupling."""

    def __init__(self, model_name: str, coupling_names: tuple[str, ...]) -> None:
        m = len(coupling_names)
        d = ", ".join(f"d{i + 1}" for i in range(m))
        super().__init__(
            f"model {model_name!r} has {m} couplings ({', '.join(coupling_names)}); this function takes one coupling. "
            f"Use model.along(({d})) for the one-coupling model H0 + t·(" + " + ".join(f"d{i + 1}·V{i + 1}" for i in range(m))
            + ") on a ray, or the functions of several couplings: multi_series, validity_region, ray_convergence, "
            "track_grid"
        )


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


def _perturbation_list(v: Any) -> list | None:
    """The matrices of several couplings, or ``None`` when ``v`` is one matrix.

    A list/tuple whose entries are all matrices (ndarray of 2 dimensions,
    scipy.sparse, qutip.Qobj, nested lists of 2 dimensions) or a 3-dimensional
    ndarray is several; a nested list of numbers is one matrix.
    """
    if isinstance(v, np.ndarray):
        return list(v) if v.ndim == 3 else None
    if not isinstance(v, (list, tuple)) or not v:
        return None
    return list(v) if all(_is_one_matrix(x) for x in v) else None


def _is_one_matrix(x: Any) -> bool:
    if sp.issparse(x) or val._is_qobj(x):
        return True
    if isinstance(x, np.ndarray):
        return x.ndim == 2
    if isinstance(x, (list, tuple)):
        try:
            return np.ndim(x) == 2
        except ValueError:  # ragged
            return False
    return False


def _several_perturbations(h0m: Any, several: list, rtol: float) -> tuple[tuple, Any, Any]:
    """Check the matrices ``v[i]`` of several couplings; return them, a generic combination and a graph.

    All sparse stay sparse; otherwise all dense.  The graph ``Σ_i |V_i|`` has
    the union of the couplings' non-zero patterns (no cancellation).
    """
    if len(several) > MAX_COUPLINGS:
        raise ValueError(f"at most {MAX_COUPLINGS} couplings are supported; got {len(several)} matrices in v")
    mats = []
    for i, x in enumerate(several):
        m, _ = val.as_operator(x, f"v[{i}]", max_dense=DENSE_LIMIT)
        mats.append(m)
    n = h0m.shape[0]
    for i, m in enumerate(mats):
        if m.shape != h0m.shape:
            raise ValueError(f"v[{i}] must have the shape of h0 {h0m.shape}; got {m.shape}")
    if not all(sp.issparse(m) for m in mats):
        mats = [m.toarray() if sp.issparse(m) else np.asarray(m) for m in mats]
    scale = max([val.max_abs(h0m)] + [val.max_abs(m) for m in mats])
    for i, m in enumerate(mats):
        val.check_finite(m, f"v[{i}]")
        val.check_hermitian(m, f"v[{i}]", rtol, scale=scale)
    combo = sum((_GENERIC_WEIGHT**i) * m for i, m in enumerate(mats))
    graph = sum(abs(m) for m in mats)
    if sp.issparse(combo):
        combo, graph = sp.csr_matrix(combo), sp.csr_matrix(graph)
    del n
    return tuple(mats), combo, graph


def _coupling_names(names: Any, m: int) -> tuple[str, ...]:
    """Checked coupling names (default ``λ`` for one coupling, ``λ1, λ2, ...`` for several)."""
    if names is None:
        return ("λ",) if m == 1 else tuple(f"λ{i + 1}" for i in range(m))
    if isinstance(names, str):
        names = (names,)
    try:
        out = tuple(names)
    except TypeError:
        raise TypeError(f"names must be a sequence of {m} strings (one per coupling); got {names!r}") from None
    if len(out) != m or not all(isinstance(x, str) and x.strip() for x in out):
        raise ValueError(f"names must be {m} non-empty strings (one per coupling); got {names!r}")
    if len(set(out)) != m:
        raise ValueError(f"names must be distinct; got {names!r}")
    return tuple(x.strip() for x in out)


def _in_work_basis(v: Any, transform: Any, level_sectors: np.ndarray) -> Any:
    """``T^H V T`` with the work basis columns ``T``; zero between sectors, real if it is."""
    if sp.issparse(transform) and sp.issparse(v):
        w = (transform.conj().T @ v @ transform).tocsr()
    else:
        t = transform.toarray() if sp.issparse(transform) else np.asarray(transform)
        vd = v.toarray() if sp.issparse(v) else np.asarray(v)
        w = t.conj().T @ vd @ t
        if sp.issparse(v):
            w = sp.csr_matrix(_maybe_sparse(w))
    w = _realify(_zero_between_sectors(w, level_sectors))
    if sp.issparse(w):
        w = sp.csr_matrix(w)
        w.eliminate_zeros()
        w.sort_indices()
    return w


def _sub_operator(v: Any, levels: np.ndarray) -> Any:
    if sp.issparse(v):
        out = v[levels][:, levels].tocsr()
        out.sort_indices()
        return out
    return np.ascontiguousarray(v[np.ix_(levels, levels)])


def _rotation_limit(v: Any) -> int:
    """Largest degenerate group rotated to good states for this storage of V (the one place for it)."""
    return MAX_SPARSE_GROUP_ROTATION if sp.issparse(v) else MAX_GROUP_ROTATION


def _regood(v: Any, groups: tuple, ambiguous: np.ndarray) -> tuple[Any, np.ndarray | None, Any]:
    """Good states of a ray's perturbation inside each degenerate group.

    Groups whose labels are unambiguous (no coupling mixes them) are sorted
    by the ray's first-order shift (a permutation of levels); mixed groups are
    rotated to the eigenvectors of the ray's block, ascending.  Returns
    ``(v, permutation or None, rotation or None)`` with the permutation
    applied first.
    """
    n = v.shape[0]
    perm = np.arange(n)
    diag = np.real(np.asarray(v.diagonal() if sp.issparse(v) else np.diag(v)))
    scale = max(val.max_abs(v), 1e-300)
    rotate = []
    limit = _rotation_limit(v)
    for g in groups:
        idx = np.asarray(g)
        if idx.size > limit:
            continue
        if np.any(ambiguous[idx]):
            rotate.append(idx)
        else:
            key = np.round(diag[idx] / (1e-9 * scale))
            perm[idx] = idx[np.lexsort((np.arange(idx.size), key))]
    moved = np.any(perm != np.arange(n))
    if moved:
        v = _permute(v, perm)
        if sp.issparse(v):
            v = sp.csr_matrix(v)
            v.sort_indices()
    if not rotate:
        return v, (perm if moved else None), None
    with sec.small_blas():
        blocks = [_good_rotation(v, idx) for idx in rotate]
    rot, _ = _rotation_matrix(n, rotate, blocks)
    if sp.issparse(v):
        v = (rot.conj().T @ v @ rot).tocsr()
        v.sort_indices()
    else:
        v = np.array(v, dtype=np.result_type(v.dtype, rot.dtype))
        for idx, u in zip(rotate, blocks):
            v[:, idx] = v[:, idx] @ u
            v[idx, :] = u.conj().T @ v[idx, :]
    return v, (perm if moved else None), rot


def _good_rotation(v: Any, idx: np.ndarray) -> np.ndarray:
    """Eigenvectors of V on the degenerate group ``idx``: its first-order good states (columns)."""
    block = _submatrix(v, idx)
    return np.linalg.eigh(0.5 * (block + block.conj().T))[1]


def _rotation_matrix(n: int, groups: list[np.ndarray], blocks: list[np.ndarray]) -> tuple[Any, np.ndarray]:
    """(N × N CSR rotation: ``blocks`` on ``groups``, identity elsewhere; mask of the rotated states)."""
    touched = np.zeros(n, dtype=bool)
    for idx in groups:
        touched[idx] = True
    rest = np.flatnonzero(~touched)
    rows = [np.repeat(idx, idx.size) for idx in groups] + [rest]
    cols = [np.tile(idx, idx.size) for idx in groups] + [rest]
    data = [u.ravel() for u in blocks] + [np.ones(rest.size)]
    dtype = np.result_type(*[x.dtype for x in data], np.float64)
    rot = sp.csr_matrix((np.concatenate(data).astype(dtype), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    return rot, touched


def coupling_display(scale: Any, unit: Any, name: Any = None) -> tuple[float | None, str | None, str | None]:
    """Validate ``coupling_scale``, ``coupling_unit`` and ``coupling_name`` (see :class:`Model`)."""
    if scale is not None:
        scale = val.as_real(scale, "coupling_scale")
        if scale == 0:
            raise ValueError(f"coupling_scale must be a nonzero finite number (the coupling at λ = 1); got {scale!r}")
    for what, x, example in (("coupling_unit", unit, "'MHz'"), ("coupling_name", name, "'g'")):
        if x is None:
            continue
        if not isinstance(x, str) or not x.strip():
            raise TypeError(f"{what} must be a non-empty string such as {example}; got {x!r}")
        if scale is None:
            raise ValueError(f"{what}={x!r} needs coupling_scale (the physical coupling at λ = 1)")
    return scale, unit, name


def physical_coupling_text(coupling: float, scale: float | None, unit: str | None, name: str | None) -> str:
    """``"g = 52.8 MHz"`` for λ = ``coupling`` (4 significant digits); ``""`` when ``scale`` is None.

    The one place that formats a physical coupling beside λ (reports, figures, panels).
    """
    if scale is None or coupling is None or not np.isfinite(coupling):
        return ""
    value = f"{coupling * scale:.4g}" + (f" {unit}" if unit else "")
    return f"{name} = {value}" if name else value


def _is_diagonal(m: Any) -> bool:
    if sp.issparse(m):
        c = m.tocoo()
        off = c.row != c.col
        return not np.any(c.data[off] != 0)
    return not np.any(m[~np.eye(m.shape[0], dtype=bool)] != 0)


def _permute(m: Any, perm: np.ndarray) -> Any:
    if sp.issparse(m):
        m = sp.csr_matrix(m)
        inv = np.empty(perm.size, dtype=np.int64)
        inv[perm] = np.arange(perm.size)
        rows = m[perm]
        out = sp.csr_matrix((rows.data, inv[rows.indices], rows.indptr), shape=m.shape)
        out.has_sorted_indices = False
        return out
    return m[np.ix_(perm, perm)]


def _submatrix(m: Any, idx: np.ndarray) -> np.ndarray:
    if sp.issparse(m):
        return m[idx][:, idx].toarray()
    return np.array(m[np.ix_(idx, idx)])


def _maybe_sparse(a: np.ndarray) -> Any:
    tol = 1e-14 * max(float(np.max(np.abs(a))), 1e-300)
    b = np.where(np.abs(a) > tol, a, 0)
    if np.count_nonzero(b) < 0.25 * a.size:
        return sp.csr_matrix(b)
    return a


def _realify(m: Any) -> Any:
    if not np.iscomplexobj(m.data if sp.issparse(m) else m):
        return m
    data = m.data if sp.issparse(m) else m
    if data.size == 0 or np.max(np.abs(data.imag)) == 0:
        return m.real.copy() if not sp.issparse(m) else sp.csr_matrix(m.real)
    return m


def _v_in_basis(v: Any, t0: Any, cons: sec.ConservedBasis) -> Any:
    """V in the unperturbed basis rotated by the conserved operators' eigenvectors (general path)."""
    rot = cons.rotation
    if t0 is None and rot is None:
        return v.copy()
    if t0 is None and cons.rep is not None and not cons.general and not sp.issparse(v):
        # involution pairs: <a|V|b> = c_a <rep_a|V|b> within a sector (P commutes with V)
        w = v[cons.rep] @ rot.toarray()
        return w * cons.rep_scale[:, None]
    if t0 is None:
        basis = rot
    elif rot is None:
        basis = t0
    else:
        basis = (t0 @ rot) if sp.issparse(t0) else np.asarray(t0 @ rot)
    if sp.issparse(basis) and sp.issparse(v):
        return (basis.conj().T @ v @ basis).tocsr()
    b = basis.toarray() if sp.issparse(basis) else basis
    vd = v.toarray() if sp.issparse(v) else v
    w = b.conj().T @ vd @ b
    return _maybe_sparse(w) if sp.issparse(v) else w


def _zero_between_sectors(v: Any, sector_of: np.ndarray) -> Any:
    """Set V's elements between different sectors to exactly zero."""
    if sp.issparse(v):
        v = sp.csr_matrix(v)
        rows = np.repeat(np.arange(v.shape[0]), np.diff(v.indptr))
        keep = sector_of[rows] == sector_of[v.indices]
        if np.all(keep):
            return v
        indptr = np.concatenate([[0], np.cumsum(np.bincount(rows[keep], minlength=v.shape[0]))])
        return sp.csr_matrix((v.data[keep], v.indices[keep], indptr), shape=v.shape)
    if np.all(sector_of == sector_of[0]):
        return v
    out = np.array(v, copy=True)
    out[sector_of[:, None] != sector_of[None, :]] = 0.0
    return out


def _good_states(v: Any, sector_of: np.ndarray, cid: np.ndarray, rtol: float) -> tuple[Any, Any, list, list]:
    """Rotate V's groups (sector ∩ equal-energy run) to good states.

    Returns ``(v, rotation or None, rotated groups, groups too large to rotate)``.
    """
    n = sector_of.size
    key = sector_of * (int(cid.max()) + 1 if n else 1) + cid
    _, key = np.unique(key, return_inverse=True)
    counts = np.bincount(key)
    multi = np.flatnonzero(counts[key] >= 2)
    if multi.size == 0:
        return v, None, [], []
    vscale = val.max_abs(v)
    tol = rtol * max(vscale, 1e-300)
    if sp.issparse(v):
        v = sp.csr_matrix(v)
        r = np.repeat(np.arange(n), np.diff(v.indptr))
        cc, d = v.indices, v.data
        cand = counts[key[r]] >= 2
        r, cc, d = r[cand], cc[cand], d[cand]
        sel = (r != cc) & (key[r] == key[cc]) & (np.abs(d) > tol)
        mixing = np.unique(key[r[sel]])
    else:
        sub = np.asarray(v)[np.ix_(multi, multi)]
        same = key[multi][:, None] == key[multi][None, :]
        np.fill_diagonal(same, False)
        hit = same & (np.abs(sub) > tol)
        mixing = np.unique(key[multi][np.any(hit, axis=1)])
    if mixing.size == 0:
        return v, None, [], []
    order = np.argsort(key, kind="stable")
    starts = np.searchsorted(key[order], mixing)
    ends = np.searchsorted(key[order], mixing, side="right")
    rotated, too_big, blocks = [], [], []
    limit = _rotation_limit(v)
    with sec.small_blas():
        for a, b in zip(starts, ends):
            idx = np.sort(order[a:b])
            if idx.size > limit:
                too_big.append(idx)
                continue
            rotated.append(idx)
            blocks.append(_good_rotation(v, idx))
    if not rotated:
        return v, None, [], too_big
    rot, touched = _rotation_matrix(n, rotated, blocks)
    if sp.issparse(v):
        # only rows and columns of rotated groups change: V' = V_rest + R^H V_touched R
        rows = np.repeat(np.arange(n), np.diff(v.indptr))
        hit = touched[rows] | touched[v.indices]
        keep = sp.csr_matrix(
            (v.data[~hit], v.indices[~hit], np.concatenate([[0], np.cumsum(np.bincount(rows[~hit], minlength=n))])), shape=v.shape
        )
        part = sp.csr_matrix(
            (v.data[hit], v.indices[hit], np.concatenate([[0], np.cumsum(np.bincount(rows[hit], minlength=n))])), shape=v.shape
        )
        v = (keep + (rot.conj().T @ part @ rot)).tocsr()
    else:
        v = np.array(v, dtype=np.result_type(v.dtype, rot.dtype))
        for idx, u in zip(rotated, blocks):
            v[:, idx] = v[:, idx] @ u
            v[idx, :] = u.conj().T @ v[idx, :]
    return v, rot, rotated, too_big


def _sparse_work_v(v: Any, cons: sec.ConservedBasis, sector_of: np.ndarray, cid: np.ndarray, rtol: float, declared: bool) -> tuple:
    """Work-basis V for a diagonal H0 and sparse V, in a few passes over V's entries.

    V is folded onto the work order (and onto the pair combinations of a
    declared involution) by mapping column indices, the groups that V mixes
    are found from the same entries, and only groups of at most
    :data:`MAX_SPARSE_GROUP_ROTATION` states are rotated.  Returns
    ``(V_work, perm, good-state rotation in positions, rotated groups, groups
    left unrotated)``.
    """
    n = v.shape[0]
    v = sp.csr_matrix(v)
    # ascending energy, then sector, then the user's order: the energies are equal inside a round-off
    # cluster and ascend with its id, so one stable sort of (cluster, sector) gives that order
    group_id = cid * (int(sector_of.max()) + 1 if n else 1) + sector_of
    small = n and int(group_id.max()) < 2**15
    perm0 = np.argsort(group_id.astype(np.int16) if small else group_id, kind="stable")  # radix sort for 16 bits
    inv0 = np.empty(n, dtype=np.int64)
    inv0[perm0] = np.arange(n)
    sec_w = sector_of[perm0]
    v0 = _fold(v, cons, perm0, inv0)
    if declared and cons.rep is None:
        v0 = _zero_between_sectors(v0, sec_w)

    # good states: groups (sector, equal-energy run) that V mixes; in this order the pair (energy
    # cluster, sector) never decreases, so each group is a run of positions
    cid_w = cid[perm0]
    new_group = np.concatenate([[True], (cid_w[1:] != cid_w[:-1]) | (sec_w[1:] != sec_w[:-1])]) if n else np.zeros(0, bool)
    key = np.cumsum(new_group) - 1
    n_groups = int(key[-1]) + 1 if n else 0
    key = key.astype(np.int16 if n_groups < 2**15 else np.int64)  # small: it is spread over every entry
    counts = np.bincount(key, minlength=n_groups)
    rot3_pos, rotated, too_big = None, [], []
    vscale = val.max_abs(v0)
    vdiag = v0.diagonal()
    if np.any(counts >= 2) and v0.nnz:
        # a group is mixed when it holds more entries above round-off than its diagonal does; the group of
        # a row is a run of columns [start, end), so no gather over the entries is needed
        tol = rtol * max(vscale, 1e-300)
        lengths = np.diff(v0.indptr)
        start = np.searchsorted(key, np.arange(n_groups)).astype(v0.indices.dtype)
        end = np.append(start[1:], n).astype(v0.indices.dtype)
        inside = v0.indices >= np.repeat(start[key], lengths)
        inside &= v0.indices < np.repeat(end[key], lengths)
        inside &= _above(v0.data, tol)
        n_inside = np.bincount(np.repeat(key, lengths)[inside], minlength=n_groups)
        del inside
        n_diagonal = np.bincount(key[_above(vdiag, tol)], minlength=n_groups)
        mixing = np.flatnonzero(n_inside > n_diagonal)
        if mixing.size:
            starts = np.searchsorted(key, mixing)
            rows_, cols_, data_ = [], [], []
            limit = _rotation_limit(v0)
            with sec.small_blas():
                for grp, a in zip(mixing, starts):
                    idx = np.arange(a, a + counts[grp])
                    if idx.size > limit:
                        too_big.append(perm0[idx])
                        continue
                    block = v0[idx][:, idx].toarray()
                    _, u = np.linalg.eigh(0.5 * (block + block.conj().T))
                    rotated.append(idx)
                    rows_.append(np.repeat(idx, idx.size))
                    cols_.append(np.tile(idx, idx.size))
                    data_.append((u - np.eye(idx.size)).ravel())
            if rotated:
                e = sp.csr_matrix((np.concatenate(data_), (np.concatenate(rows_), np.concatenate(cols_))), shape=(n, n))
                y = v0 @ e  # columns of rotated groups only; (V E)^H = E^H V
                yh = y.conj().T.tocsr()
                v0 = _add_on_rows(v0, (y + yh + yh @ e).tocsr())  # R^H V R with R = 1 + E
                r3 = e + sp.identity(n, format="csr")
                c3 = sp.coo_matrix(r3)
                rot3_pos = sp.csr_matrix((c3.data, (perm0[c3.row], perm0[c3.col])), shape=(n, n))
                rotated = [perm0[idx] for idx in rotated]
                vdiag = v0.diagonal()
    vdiag = np.real(vdiag)
    shift = np.round(vdiag / (1e-9 * vscale)) if vscale > 0 else np.zeros(n)
    # inside each group: ascending first-order shift, ties in the present order (already the case unless
    # some group has a descending step)
    if np.any((np.diff(shift) < 0) & ~new_group[1:]):
        perm1 = np.lexsort((np.arange(n), shift, key))
        v0 = _permute(v0, perm1)
        return v0, perm0[perm1], rot3_pos, rotated, too_big
    return v0, perm0, rot3_pos, rotated, too_big


def _above(x: np.ndarray, tol: float) -> np.ndarray:
    """``|x| > tol`` (bool array) without an array of absolute values for real ``x``."""
    if np.iscomplexobj(x):
        return np.abs(x) > tol
    out = x > tol
    out |= x < -tol
    return out


def _fold(v: sp.csr_matrix, cons: sec.ConservedBasis, perm0: np.ndarray, inv0: np.ndarray) -> sp.csr_matrix:
    """``V`` in the basis ordered by ``perm0`` (rows and columns), canonical CSR.

    Without a pairing this is ``V[perm0][:, perm0]``.  With the involution
    pairs of a declared operator (``cons.rep``) it is V between the pair
    combinations: ``<a|V|b> = c_a <rep_a|V|b>`` for b in a's half (P commutes
    with V), so row a is row ``rep_a`` of V with each user column k moved to
    the combination of k's pair that lies in a's half (+1 / -1 / none),
    times the combination's coefficient.  Only index arrays are mapped: one
    row gather, one column gather, one sort.
    """
    n = v.shape[0]
    if cons.rep is None:
        part = v[perm0]
        cols = np.take(inv0.astype(part.indices.dtype), part.indices, out=part.indices, mode="clip")  # in place
        data = part.data
    else:
        rot = sp.csr_matrix(cons.rotation)
        rot.sort_indices()
        hid = np.sign(np.nan_to_num(cons.values[:, 0], nan=0.0)).astype(np.int64) + 1  # half of each position: 0, 1, 2
        per_k = np.diff(rot.indptr)
        col = np.full((3, n), -1, dtype=np.int32 if n < 2**31 else np.int64)  # column of user state k in half h
        coef = np.zeros((3, n), dtype=rot.dtype)
        for j in range(2):  # a user state is in at most two combinations (its pair's + and -)
            has = per_k > j
            at = rot.indptr[:-1][has] + j
            pos = rot.indices[at]
            k = np.flatnonzero(has)
            col[hid[pos], k] = inv0[pos]
            coef[hid[pos], k] = rot.data[at]
        part = v[cons.rep[perm0]]
        lengths = np.diff(part.indptr)
        flat = np.repeat(hid[perm0] * n, lengths).astype(np.intp, copy=False)  # intp: numpy gathers with it as is
        flat += part.indices  # (half of the row, user column)
        # into the gathered indices' buffer (no longer needed); "clip" writes in place (indices valid by construction)
        cols = np.take(col.ravel(), flat, out=part.indices if part.indices.dtype == col.dtype else None, mode="clip")
        scale = cons.rep_scale[perm0]
        uniform = bool(scale.size) and bool(np.all(scale == scale[0]))
        if uniform:
            coef *= scale[0]  # e.g. every state paired: one factor √2, in the table
        data = part.data  # a copy made by the row gather: scaled in place
        if np.result_type(data.dtype, coef.dtype) != data.dtype:
            data = data.astype(np.result_type(data.dtype, coef.dtype))
        size = np.abs(coef[coef != 0])
        if uniform and not np.iscomplexobj(coef) and size.size and np.all(size == size[0]):
            # every factor is ±c (e.g. ±1 when all states are paired): gather signs, one byte per entry
            data *= np.take(np.sign(coef).astype(np.int8).ravel(), flat)
            if size[0] != 1.0:
                data *= size[0]
        else:
            data *= coef.ravel()[flat]
        del flat
        if not uniform:
            data *= np.repeat(scale, lengths)
        if np.any(cols < 0):  # a column with no combination in the row's half (zero when P commutes with V)
            keep = cols >= 0
            kept_rows = np.repeat(np.arange(n), lengths)[keep]
            indptr = np.concatenate([[0], np.cumsum(np.bincount(kept_rows, minlength=n))])
            out = sp.csr_matrix((data[keep], cols[keep], indptr), shape=(n, n))
            out.sum_duplicates()
            return out
    out = sp.csr_matrix((data, cols.astype(part.indices.dtype, copy=False), part.indptr), shape=(n, n))
    out.sum_duplicates()  # pairs fold two user columns onto one combination; sorts the indices
    return out


def _add_on_rows(a: sp.csr_matrix, delta: sp.csr_matrix) -> sp.csr_matrix:
    """``a + delta`` for a ``delta`` with few non-empty rows: only those rows are added, the rest copied."""
    rows = np.flatnonzero(np.diff(delta.indptr))
    if rows.size == 0:
        return a
    n = a.shape[0]
    sub = (a[rows] + delta[rows]).tocsr()
    sub.sort_indices()
    old = np.diff(a.indptr)
    lengths = old.copy()
    lengths[rows] = np.diff(sub.indptr)
    indptr = np.concatenate([[0], np.cumsum(lengths)])
    kept = np.ones(n, dtype=bool)
    kept[rows] = False
    src = np.repeat(kept, old)  # entries of a in untouched rows
    dst = np.repeat(kept, lengths)  # their places in the sum
    data = np.empty(int(indptr[-1]), dtype=np.result_type(a.dtype, sub.dtype))
    indices = np.empty(int(indptr[-1]), dtype=np.result_type(a.indices.dtype, sub.indices.dtype))
    data[dst], indices[dst] = a.data[src], a.indices[src]
    data[~dst], indices[~dst] = sub.data, sub.indices
    out = sp.csr_matrix((data, indices, indptr), shape=a.shape)
    out.has_sorted_indices = True
    return out


def _compose(t0: Any, rot: Any, rot3: Any, perm: np.ndarray, n: int) -> Any:
    """User-basis columns of the work basis: t0 · rot · rot3, columns permuted."""
    t = None
    for f in (t0, rot, rot3):
        if f is None:
            continue
        if t is None:
            t = f
        elif sp.issparse(t) and sp.issparse(f):
            t = (t @ f).tocsr()
        else:
            t = np.asarray(t @ f)
    if t is None:
        return sp.csr_matrix((np.ones(n), (perm, np.arange(n))), shape=(n, n))
    if sp.issparse(t):
        t = sp.csr_matrix(t)
        inv = np.empty(n, dtype=np.int64)
        inv[perm] = np.arange(n)
        return sp.csr_matrix((t.data, inv[t.indices], t.indptr), shape=t.shape)
    return t[:, perm]


def _level_names(
    labels: list | None,
    dims: tuple | None,
    n: int,
    h0_diag: bool,
    t0: Any,
    cons: sec.ConservedBasis,
    perm: np.ndarray,
    inv: np.ndarray,
    e0_rel: np.ndarray,
    ambiguous_pos: np.ndarray,
    mixed_groups: list,
    big_groups: list,
    op_names: list,
) -> LevelNames:
    """Label tables in work order (see :mod:`ptcheck._labels`)."""
    if h0_diag:
        pos_src = np.arange(n, dtype=np.int64)
    elif labels is not None:
        # user labels name the eigenstates of h0 in ascending energy
        rank = np.empty(n, dtype=np.int64)
        rank[np.lexsort((np.arange(n), e0_rel))] = np.arange(n)
        pos_src = rank
    elif dims is not None:
        # name each eigenstate of h0 by its dominant product-basis component
        t = t0
        if sp.issparse(t):
            w = sp.csc_matrix(abs(t).power(2))
            dom = np.asarray(w.argmax(axis=0)).ravel()
            weight = np.asarray(w.max(axis=0).toarray()).ravel()
        else:
            w = np.abs(np.asarray(t)) ** 2
            dom = np.argmax(w, axis=0)
            weight = w[dom, np.arange(n)]
        pos_src = np.where(weight > 0.5, dom, -1).astype(np.int64)
    else:
        pos_src = np.full(n, -1, dtype=np.int64)
    before = pos_src.copy()
    if cons.mixed is not None:
        pos_src[cons.mixed] = -1
    pair_lo = pair_hi = pair_plus = paired_level = None
    if cons.pair_lo is not None:
        lo, hi, sign = cons.pair_lo.copy(), cons.pair_hi.copy(), cons.pair_sign
        paired = lo >= 0
        pos_src[paired] = -1
        lo[ambiguous_pos] = -1
        hi[ambiguous_pos] = -1
        pair_lo, pair_hi, pair_plus = lo[perm], hi[perm], (sign > 0)[perm]
        paired_level = np.where(paired, inv, -1)
    group_of = np.full(n, -1, dtype=np.int64)
    group_list: list = []
    for idx in mixed_groups + big_groups:
        users = before[idx]
        ok = users >= 0
        if cons.pair_lo is not None:
            ok &= cons.pair_lo[np.maximum(users, 0)] < 0
        members = users[ok]
        if members.size:
            group_of[members] = len(group_list)
            group_list.append(("mixed", members, np.sort(inv[idx])))
    if cons.mixed is not None and op_names:
        kind = "operator " + ", ".join(repr(x) for x in op_names)
        pos = np.flatnonzero(cons.mixed & (before >= 0))
        users = before[pos]
        free = group_of[users] < 0
        for p, u in zip(pos[free], users[free]):
            group_of[u] = len(group_list)
            group_list.append((kind, np.array([u]), np.array([inv[p]])))
    groups = (group_of, group_list) if group_list else None
    pos_src[ambiguous_pos] = -1
    return LevelNames(
        labels=labels,
        dims=dims,
        n_user=n,
        src=pos_src[perm],
        ranks=np.arange(n, dtype=np.int64),
        pair_lo=pair_lo,
        pair_hi=pair_hi,
        pair_plus=pair_plus,
        paired_level=paired_level,
        groups=groups,
        pair_operator=op_names[0] if op_names else "",
    )


def _runs(e0: np.ndarray, tol: float) -> list[np.ndarray]:
    """Runs (size >= 2) of consecutive ascending energies closer than ``tol``."""
    if e0.size < 2:
        return []
    brk = np.flatnonzero(np.diff(e0) > tol) + 1
    bounds = np.concatenate([[0], brk, [e0.size]])
    return [np.arange(a, b) for a, b in zip(bounds[:-1], bounds[1:]) if b - a > 1]


def _group_ids(e0: np.ndarray, level_sectors: np.ndarray, tol: float) -> np.ndarray:
    """Degenerate-group id of every level (-1: not degenerate), groups formed inside each sector."""
    n = e0.size
    out = np.full(n, -1, dtype=np.int64)
    if n < 2:
        return out
    order = np.lexsort((np.arange(n), level_sectors))  # by sector, ascending level (= ascending energy)
    s, e = level_sectors[order], e0[order]
    brk = np.concatenate([[True], (s[1:] != s[:-1]) | (np.diff(e) > tol)])
    ids = np.cumsum(brk) - 1
    counts = np.bincount(ids)
    multi = counts[ids] >= 2
    out[order[multi]] = ids[multi]
    return out


def _spectral_norm(v: Any) -> float:
    n = v.shape[0]
    if sp.issparse(v):
        if v.nnz == 0:
            return 0.0
        if n <= 400:
            return float(np.max(np.abs(np.linalg.eigvalsh(v.toarray()))))
        from scipy.sparse.linalg import eigsh

        w = eigsh(v, k=1, which="LM", return_eigenvectors=False, tol=1e-10)
        return float(abs(w[0]))
    return float(np.max(np.abs(np.linalg.eigvalsh(v)))) if n else 0.0
