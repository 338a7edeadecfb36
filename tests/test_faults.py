"""Bad input at the public edge: every case raises a clear ValueError/TypeError that names the problem.

Each test asserts the exception type AND that the message names what was wrong (and, where it matters,
that no work was done before the refusal).  No physics is computed here; the few accepted inputs are
checked against numpy (the reference eigensolver), common practice, no source.
"""

import math

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck import Model, block_series, compare, convergence, quantity_series, rs_series, validity_boundary
from ptcheck import _validation as val
from ptcheck.approximants import Pade, parse_order
from ptcheck.maps import validity_map
from ptcheck.models import (
    anharmonic_oscillator,
    charge_qubit,
    coupled_kerr_qubits,
    jaynes_cummings,
    kerr_qubit_resonator,
    planar_rotor,
    rabi,
    two_level,
)
from ptcheck.quantities import transition_frequency
from ptcheck.report import run_check


def small_model():
    rng = np.random.default_rng(7)
    a = rng.normal(size=(4, 4))
    return Model(np.diag([0.0, 1.0, 2.1, 3.3]), 0.1 * (a + a.T))


# ---------------------------------------------------------------------- orders
HUGE = [10**6, 10**9]


@pytest.mark.parametrize("order", HUGE)
@pytest.mark.parametrize(
    "call",
    [
        lambda m, k: rs_series(m, 0, k),
        lambda m, k: block_series(m, [0, 1], k),
        lambda m, k: compare(m, [0], [k], [0.1, 0.2]),
        lambda m, k: validity_boundary(m, 0, k, rtol=0.01),
        lambda m, k: convergence(m, 0, k),
        lambda m, k: quantity_series(m, transition_frequency(1, 0), k),
        lambda m, k: run_check(m, [0], [k], coupling=0.1),
    ],
    ids=["rs_series", "block_series", "compare", "validity_boundary", "convergence", "quantity_series", "run_check"],
)
def test_huge_orders_are_refused_at_once(call, order):
    # refused before any work: no hang (order 10^6 costs ~order^2) and no out-of-memory (10^9)
    with pytest.raises(ValueError, match=rf"order {order} is beyond the limit of {val.MAX_ORDER} orders"):
        call(small_model(), order)


def test_order_limit_covers_strings_and_pade():
    assert val.MAX_ORDER == 1000
    assert parse_order(str(val.MAX_ORDER)) == val.MAX_ORDER  # the limit itself is allowed
    with pytest.raises(ValueError, match="1001 is beyond the limit of 1000"):
        parse_order("1001")
    with pytest.raises(ValueError, match=r"Padé\[600/600\]\(λ²\) needs the series to order 2400"):
        parse_order("pade600/600@2")
    with pytest.raises(ValueError, match="needs the series to order 1001"):
        parse_order(Pade(1000, 1))
    with pytest.raises(TypeError, match="order must be an int"):
        val.check_order(2.0)
    with pytest.raises(TypeError, match="order must be an int"):
        val.check_order(True)


def test_order_memory_estimate():
    # (order + 1) x N x 16 bytes against the 2 GiB budget (the docstring's formula)
    n = 200_000
    fits = val.SERIES_MEMORY_BUDGET // (16 * n) - 1
    assert val.check_order(fits, n=n) == fits
    with pytest.raises(ValueError, match=rf"order {fits + 1} on a basis of N = {n} states needs .* GB.*at most order {fits}"):
        val.check_order(fits + 1, n=n)
    big = Model(sp.diags(np.arange(n, dtype=float), format="csr"), sp.diags(np.full(n - 1, 0.1), 1, format="csr")
                + sp.diags(np.full(n - 1, 0.1), -1, format="csr"))
    with pytest.raises(ValueError, match=f"basis of N = {n} states"):
        rs_series(big, 0, 1000)


# ---------------------------------------------------------------------- Hermiticity, element by element
def test_small_asymmetry_next_to_a_huge_entry_is_refused():
    v = np.zeros((3, 3))
    v[2, 2] = 1e10
    v[1, 0], v[0, 1] = 0.2, 0.1
    with pytest.raises(ValueError, match=r"v is not Hermitian.*v\[0,1\] = 0\.1 and v\[1,0\] = 0\.2"):
        Model(np.diag([0.0, 1.0, 2.0]), v)
    with pytest.raises(ValueError, match=r"v is not Hermitian.*v\[0,1\] = 0\.1 and v\[1,0\] = 0\.2"):
        Model(np.diag([0.0, 1.0, 2.0]), sp.csr_matrix(v))
    # a huge constant in H0 does not excuse it either
    w = np.array([[0.0, 0.1], [0.2, 0.0]])
    with pytest.raises(ValueError, match="v is not Hermitian"):
        Model(np.diag([0.0, 1.0]) + 1e9 * np.eye(2), w)
    h0 = np.array([[0.0, 1e-3], [2e-3, 1.0]])
    with pytest.raises(ValueError, match=r"h0 is not Hermitian.*h0\[0,1\] = 0\.001 and h0\[1,0\] = 0\.002"):
        Model(h0, np.eye(2))


@pytest.mark.parametrize("n", [5, 60, 200])
def test_rounding_noise_of_a_computed_hermitian_matrix_is_accepted(n):
    # Q diag(w) Q^H in floating point is Hermitian up to rounding; the model must accept it,
    # and its exact spectrum must be numpy's (reference eigensolver; common practice, no source)
    rng = np.random.default_rng(n)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n)))
    w = np.sort(rng.normal(size=n))
    a = q @ np.diag(w) @ q.conj().T
    assert np.max(np.abs(a - a.conj().T)) > 0  # really not exactly Hermitian
    m = Model(a, np.diag(np.arange(n, dtype=float)))
    np.testing.assert_allclose(m.e0, np.linalg.eigvalsh((a + a.conj().T) / 2), atol=1e-10)


# ---------------------------------------------------------------------- sizes before copies
def test_dense_matrix_beyond_the_dense_limit_is_refused_before_any_copy():
    from ptcheck.model import DENSE_LIMIT

    n = 20_000
    v = np.broadcast_to(np.float64(0.0), (n, n))  # a read-only view: 3.2 GB if ever copied
    h0 = sp.diags(np.arange(n, dtype=float), format="csr")
    with pytest.raises(ValueError, match=rf"v is a dense 20000 x 20000 matrix \(3\.2 GB\).*up to N = {DENSE_LIMIT}.*sparse"):
        Model(h0, v)


def test_basis_and_entry_caps():
    n = val.MAX_BASIS_SIZE + 1
    huge = sp.csr_matrix((n, n))
    with pytest.raises(ValueError, match=rf"h0 has shape \({n}, {n}\).*more than {val.MAX_BASIS_SIZE} states"):
        Model(huge, huge)


@pytest.mark.parametrize(
    "call, words",
    [
        (lambda: jaynes_cummings(n_photons=10**7), r"n_photons must be an int <= 524288; got 10000000 \(the size cap"),
        (lambda: rabi(n_photons=10**7), r"n_photons must be an int <= 524288; got 10000000"),
        (lambda: kerr_qubit_resonator(n_photons=10**7), r"n_photons must be an int <= 1048576; got 10000000"),
        (lambda: kerr_qubit_resonator(n_qubit=100, n_photons=100_000), r"10000000 states \(n_qubit 100 x n_photons 100000\)"),
        (lambda: coupled_kerr_qubits(n_levels=10**4), r"n_levels must be an int <= 256; got 10000"),
        (lambda: anharmonic_oscillator(n_basis=10**9), r"n_basis must be an int <= 1048576; got 1000000000"),
        (lambda: charge_qubit(n_max=10**7), r"n_max must be an int <= 10000; got 10000000"),
        (lambda: planar_rotor(m_max=10**7), r"m_max must be an int <= 10000; got 10000000"),
    ],
)
def test_builders_have_size_caps(call, words):
    with pytest.raises(ValueError, match=words):
        call()


# ---------------------------------------------------------------------- tolerances and choices
@pytest.mark.parametrize("bad", [True, np.bool_(True), "0.01", 1j])
def test_bools_strings_and_complex_are_not_tolerances(bad):
    m = two_level()
    with pytest.raises(TypeError, match=r"rtol must be a positive number; got"):
        validity_boundary(m, 0, 2, rtol=bad)
    with pytest.raises(TypeError, match=r"rtol must be a positive number; got"):
        run_check(m, [0], [2], coupling=0.1, rtol=bad)
    with pytest.raises(TypeError, match=r"rtol must be a positive number; got"):
        validity_map("two_level", "delta", [1.0], level=0, order=2, rtol=bad, executor="serial")
    with pytest.raises(TypeError, match=r"tol must be a positive number; got"):
        validity_boundary(m, 0, 2, tol=bad)


def test_bool_couplings_are_refused():
    with pytest.raises(TypeError, match="couplings must be real numbers"):
        compare(two_level(), [0], [2], True)
    with pytest.raises(TypeError, match="couplings must be real numbers"):
        compare(two_level(), [0], [2], np.array([True, False]))


def never_called(**kwargs):
    """Module-level builder that fails the test if a map ever gets to build a model."""
    raise AssertionError("the map started working before checking its arguments")


@pytest.mark.parametrize(
    "kwargs, exc, words",
    [
        (dict(treatment="bogus"), ValueError, "treatment must be one of .*got 'bogus'"),
        (dict(backend="gpu"), ValueError, "backend must be one of .*got 'gpu'"),
        (dict(max_coupling=-1.0), ValueError, "max_coupling must be a positive finite number; got -1.0"),
        (dict(direction=True), ValueError, "direction must be \\+1 or -1; got True"),
        (dict(executor="threads"), ValueError, "executor must be .*got 'threads'"),
        (dict(executor=object()), TypeError, "executor must be a concurrent.futures.Executor .*got object"),
        (dict(order=10**6), ValueError, "order 1000000 is beyond the limit"),
    ],
)
def test_validity_map_refuses_before_running(kwargs, exc, words):
    opts = dict(level=0, order=2, rtol=0.01, executor="serial") | kwargs
    with pytest.raises(exc, match=words):
        validity_map(never_called, "delta", [1.0, 2.0], **opts)


# ---------------------------------------------------------------------- figure export
@pytest.fixture
def figure():
    from matplotlib.figure import Figure

    fig = Figure()
    fig.add_subplot().plot([0, 1], [0, 1])
    return fig


@pytest.mark.parametrize(
    "kwargs, exc, words",
    [
        (dict(dpi=0), ValueError, "dpi must be a positive finite number; got 0"),
        (dict(dpi=math.nan), ValueError, "dpi must be a positive finite number; got nan"),
        (dict(dpi=1e6), ValueError, "dpi must be at most 1200; got 1000000.0"),
        (dict(dpi=True), TypeError, "dpi must be a positive number; got True"),
        (dict(size=(1e5, 7.5)), ValueError, "size must be at most 100 inches a side; got \\(100000.0, 7.5\\)"),
        (dict(size=(0.0, 7.5)), ValueError, "size \\(width, inches\\) must be a positive finite number; got 0.0"),
        (dict(size="big"), TypeError, "size must be two numbers"),
        (dict(size=(90, 90), dpi=1000), ValueError, "would have 8.1e\\+09 pixels"),
        (dict(min_fontsize=-1), ValueError, "min_fontsize must be a positive finite number; got -1"),
        (dict(format="gif"), ValueError, "format must be one of .*got 'gif'"),
    ],
)
def test_save_refuses_bad_settings_and_writes_nothing(figure, tmp_path, kwargs, exc, words):
    from ptcheck.plots import save

    with pytest.raises(exc, match=words):
        save(figure, tmp_path / "f.png", **kwargs)
    assert list(tmp_path.iterdir()) == []


def test_save_refuses_a_folder_or_an_empty_path(figure, tmp_path):
    from ptcheck.plots import save

    with pytest.raises(ValueError, match="is a folder; give a file name inside it"):
        save(figure, tmp_path)
    with pytest.raises(ValueError, match="path is empty"):
        save(figure, "")
    with pytest.raises(ValueError, match="does not exist"):
        save(figure, tmp_path / "missing" / "f.png")
    with pytest.raises(TypeError, match="path must be a file name"):
        save(figure, 12)
    assert save(figure, tmp_path / "ok.png", dpi=50).path.read_bytes()[:4] == b"\x89PNG"


# ---------------------------------------------------------------------- model files
def test_damaged_matrix_files_name_the_file(tmp_path):
    from ptcheck.modelfile import load_model_file

    (tmp_path / "broken.npz").write_bytes(b"PK\x03\x04 not really a zip archive")
    with pytest.raises(ValueError, match="broken.npz: cannot read the matrices from .*broken.npz.*BadZipFile"):
        load_model_file(tmp_path / "broken.npz")
    np.save(tmp_path / "h0.npy", np.eye(2))
    (tmp_path / "v.npy").write_bytes(b"\x93NUMPY but then garbage")
    (tmp_path / "m.toml").write_text('[model]\nh0 = "h0.npy"\nv = "v.npy"\n', encoding="utf-8")
    with pytest.raises(ValueError, match=r"m.toml: cannot read v from .*v.npy: not a readable .npy file"):
        load_model_file(tmp_path / "m.toml")
    (tmp_path / "v.npz").write_bytes(b"hello")
    (tmp_path / "s.toml").write_text('[model]\nh0 = "h0.npy"\nv = "v.npz"\n', encoding="utf-8")
    with pytest.raises(ValueError, match=r"s.toml: cannot read v from .*v.npz"):
        load_model_file(tmp_path / "s.toml")


def test_huge_dense_matrix_file_is_refused_from_its_header(tmp_path):
    from ptcheck.modelfile import load_model_file

    np.save(tmp_path / "h0.npy", np.eye(2))
    with open(tmp_path / "v.npy", "wb") as fh:  # only the header of a 20000 x 20000 array: nothing to read
        np.lib.format.write_array_header_1_0(fh, {"descr": "<f8", "fortran_order": False, "shape": (20000, 20000)})
    (tmp_path / "m.toml").write_text('[model]\nh0 = "h0.npy"\nv = "v.npy"\n', encoding="utf-8")
    with pytest.raises(ValueError, match=r"m.toml: v \(v.npy\) is a dense 20000 x 20000 matrix \(3.2 GB\)"):
        load_model_file(tmp_path / "m.toml")
