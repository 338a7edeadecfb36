"""Model construction shortcuts give the same answers as the full path.

Referees: numpy's dense ``A − Aᴴ`` for the Hermiticity check of sparse matrices; for the builder's trusted
path (input checks skipped because the builder makes its matrices Hermitian by construction), a Model built
through the public constructor from the same matrices.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

from ptcheck import Model
from ptcheck._validation import check_hermitian
from ptcheck.models import spin_chain


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**31 - 1), st.sampled_from(["hermitian", "one value off", "one entry missing", "complex"]))
def test_sparse_hermiticity_check_agrees_with_dense_numpy(key, kind):
    rng = np.random.default_rng(key)
    n = int(rng.integers(3, 30))
    a = sp.random(n, n, density=0.2, random_state=rng, format="csr")
    if kind == "complex":
        a = a + 1j * sp.random(n, n, density=0.2, random_state=rng, format="csr")
    m = (a + a.conj().T).tocsr()
    m.sum_duplicates()
    m.sort_indices()
    if m.nnz and kind in ("one value off", "one entry missing"):
        d = m.tocoo()
        k = int(np.flatnonzero(d.row != d.col)[0]) if np.any(d.row != d.col) else 0
        data = d.data.copy()
        if kind == "one value off":
            data[k] += 0.5
        else:
            data[k] = 0.0
        m = sp.csr_matrix((data, (d.row, d.col)), shape=m.shape)
        m.eliminate_zeros()
    dense = m.toarray()
    gap = float(np.max(np.abs(dense - dense.conj().T))) if n else 0.0  # numpy referee
    if gap > 1e-12:
        with pytest.raises(ValueError, match="m is not Hermitian"):
            check_hermitian(m, "m", 1e-10)
    else:
        check_hermitian(m, "m", 1e-10)


def test_trusted_builder_path_equals_the_checked_constructor():
    chain = spin_chain(n_spins=6)
    # the same matrices through the public constructor (every input check runs)
    n = 6
    dim = 1 << n
    states = np.arange(dim)
    z = np.array([[1.0 - 2.0 * ((s >> (n - 1 - i)) & 1) for i in range(n)] for s in states])
    h0 = sp.diags(-np.sum(z * np.roll(z, -1, axis=1), axis=1), format="csr")  # −Σ σz σz on a ring
    rows = np.repeat(states, n)
    cols = (states[:, None] ^ (1 << np.arange(n))[None, :]).ravel()
    v = sp.csr_matrix((-np.ones(rows.size), (rows, cols)), shape=(dim, dim))  # −Σ σx
    parity = sp.csr_matrix((np.ones(dim), (states, states ^ (dim - 1))), shape=(dim, dim))
    ref = Model(h0, v, dims=(2,) * n, conserved={"parity": parity})
    assert_allclose(chain.e0, ref.e0)
    assert [s.name for s in chain.sectors] == [s.name for s in ref.sectors]
    assert chain.degenerate_groups == ref.degenerate_groups
    assert abs(chain.v - ref.v).max() < 1e-13
    # a non-Hermitian input through the public constructor is still refused
    with pytest.raises(ValueError, match="v is not Hermitian"):
        Model(h0, sp.triu(v, format="csr"))
