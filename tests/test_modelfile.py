"""Model files (TOML): built-in models, saved matrices, levels, quantities, and clear errors."""

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck.approximants import Pade
from ptcheck.modelfile import load_model_file, parse_level, parse_quantity


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def two_level_matrices(delta=1.0, v=0.2):
    h0 = np.diag([-delta / 2, delta / 2])
    vm = np.array([[0.0, v], [v, 0.0]])
    return h0, vm


# ---------------------------------------------------------------------- levels and quantities
@pytest.mark.parametrize(
    "token, key",
    [("3", 3), (3, 3), ("(1,0)", (1, 0)), ("( 1 , 0 )", (1, 0)), ("|1,0⟩", (1, 0)), ("|1,0>", (1, 0)),
     ([1, 0], (1, 0)), ("g", "g"), ("(a,1)", ("a", 1))],
)
def test_parse_level(token, key):
    assert parse_level(token) == key


@pytest.mark.parametrize("token", ["", "()", "(1,)", 1.5, True, None])
def test_parse_level_rejects(token):
    with pytest.raises((ValueError, TypeError)):
        parse_level(token)


def test_parse_quantity_weights_and_signs():
    q = parse_quantity("chi = 0.5*(1,1) - 0.5*(1,0) - 0.5*(0,1) + 0.5*(0,0)")
    assert q.name == "chi"
    assert q.weights == {(1, 1): 0.5, (1, 0): -0.5, (0, 1): -0.5, (0, 0): 0.5}
    q = parse_quantity("f = e - g", relative_to="shift")
    assert q.weights == {"e": 1.0, "g": -1.0} and q.relative_to == "shift"
    q = parse_quantity("two = 2e-1*3 + 3")  # weight in exponent form; repeated level adds up
    assert q.weights == {3: pytest.approx(1.2)}


@pytest.mark.parametrize("text", ["f = (1,0) (0,0)", "f = ", "= (1,0)", "f = 2*", "f = a ++ b", "(1,0) - (0,0)"])
def test_parse_quantity_rejects(text):
    with pytest.raises(ValueError, match="quantity"):
        parse_quantity(text)


# ---------------------------------------------------------------------- built-in models
def test_builtin_model_with_check_table_and_quantities(tmp_path):
    f = write(tmp_path / "q.toml", """
title = "my qubit"
[model]
builtin = "kerr_qubit_resonator"
name = "my device"
[model.params]
omega_q = 5.0
omega_r = 6.5
g = 0.08
n_qubit = 3
n_photons = 4
[check]
levels = [0, [1, 0]]
orders = [2, "pade1/1"]
coupling = 0.7
rtol = 0.02
treatment = "nondegenerate"
[[quantity]]
name = "f01"
expr = "(1,0) - (0,0)"
relative_to = "shift"
[[quantity]]
name = "chi2"
levels = [[1, 1], [1, 0], [0, 1], [0, 0]]
weights = [1, -1, -1, 1]
[[quantity]]
kind = "dispersive_shift"
name = "chi"
""")
    mf = load_model_file(f)
    assert mf.kind == "builtin" and mf.builder == "kerr_qubit_resonator"
    assert mf.model.name == "my device" and mf.title == "my qubit"
    assert mf.model.n == 12 and mf.model.dims == (3, 4)
    # the parameters reach the builder: H0 of the Kerr ladder ⊗ resonator (builder docstring)
    assert mf.model.e0[mf.model.level_index((1, 0))] == pytest.approx(5.0)
    assert mf.model.e0[mf.model.level_index((0, 1))] == pytest.approx(6.5)
    assert mf.levels == (0, (1, 0))
    assert mf.orders == (2, Pade(1, 1))
    assert (mf.coupling, mf.rtol, mf.tol, mf.treatment) == (0.7, 0.02, None, "nondegenerate")
    names = [q.name for q in mf.quantities]
    assert names == ["f01", "chi2", "chi"]
    assert mf.quantities[0].relative_to == "shift"
    assert mf.quantities[1].weights[(1, 1)] == 1.0
    assert mf.quantities[2].weights == {(1, 1): 0.5, (1, 0): -0.5, (0, 1): -0.5, (0, 0): 0.5}
    assert mf.to_dict()["params"]["g"] == 0.08


# ---------------------------------------------------------------------- matrices
def test_npy_pair(tmp_path):
    h0, v = two_level_matrices()
    np.save(tmp_path / "h0.npy", h0)
    np.save(tmp_path / "v.npy", v)
    mf = load_model_file(write(tmp_path / "m.toml", '[model]\nh0 = "h0.npy"\nv = "v.npy"\nlabels = ["g", "e"]\n'))
    assert mf.kind == "npy"
    np.testing.assert_allclose(mf.model.e0, [-0.5, 0.5])
    assert mf.model.level_index("e") == 1


def test_dense_npz_archive_via_toml_and_directly(tmp_path):
    h0, v = two_level_matrices(delta=2.0)
    np.savez(tmp_path / "m.npz", h0=h0, v=v)
    mf = load_model_file(write(tmp_path / "m.toml", '[model]\nmatrices = "m.npz"\n'))
    assert mf.kind == "npz"
    np.testing.assert_allclose(mf.model.e0, [-1.0, 1.0])
    direct = load_model_file(tmp_path / "m.npz")
    assert direct.kind == "npz" and direct.model.n == 2


def test_sparse_npz_pair(tmp_path):
    h0, v = two_level_matrices()
    sp.save_npz(tmp_path / "h0.npz", sp.csr_matrix(h0))
    sp.save_npz(tmp_path / "v.npz", sp.csr_matrix(v))
    mf = load_model_file(write(tmp_path / "m.toml", '[model]\nh0 = "h0.npz"\nv = "v.npz"\n'))
    assert mf.kind == "sparse-npz"
    np.testing.assert_allclose(mf.model.e0, [-0.5, 0.5])


# ---------------------------------------------------------------------- errors
@pytest.mark.parametrize(
    "text, match",
    [
        ("[model\nbuiltin = 'two_level'", "not valid TOML"),
        ("[check]\ncoupling = 1.0\n", r"no \[model\] table"),
        ("[model]\nbuiltin = 'no_such_model'\n", "unknown built-in model 'no_such_model'"),
        ("[model]\nbuiltin = 'two_level'\n[model.params]\ndelt = 1.0\n", "has no parameter.*'delt'"),
        ("[model]\nbuiltin = 'two_level'\n[model.params]\ndelta = -1.0\n", "delta"),
        ("[model]\nbuiltin = 'two_level'\ncolour = 1\n", "unknown key.*'colour'"),
        ("[model]\nbuiltin = 'two_level'\n[check]\ntol = 1e-3\nrtol = 1e-2\n", "tol or rtol, not both"),
        ("[model]\nbuiltin = 'two_level'\n[check]\nlevels = ['x']\n", "unknown level 'x'"),
        ("[model]\nbuiltin = 'two_level'\n[check]\norders = ['three']\n", "order must be"),
        ("[model]\nbuiltin = 'two_level'\n[[quantity]]\nname = 'q'\n", "needs expr"),
        ("[model]\nbuiltin = 'two_level'\n[[quantity]]\nkind = 'nope'\n", "unknown kind 'nope'"),
        ("[model]\n", "needs builtin"),
    ],
)
def test_bad_model_files(tmp_path, text, match):
    f = write(tmp_path / "bad.toml", text)
    with pytest.raises(ValueError, match=match) as info:
        load_model_file(f)
    assert "bad.toml" in str(info.value)  # the message names the file


def test_missing_files(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        load_model_file(tmp_path / "nope.toml")
    f = write(tmp_path / "m.toml", '[model]\nh0 = "h0.npy"\nv = "v.npy"\n')
    with pytest.raises(FileNotFoundError, match="h0.npy"):
        load_model_file(f)


def test_non_hermitian_matrix(tmp_path):
    np.save(tmp_path / "h0.npy", np.diag([0.0, 1.0]))
    np.save(tmp_path / "v.npy", np.array([[0.0, 0.3], [0.1, 0.0]]))
    f = write(tmp_path / "m.toml", '[model]\nh0 = "h0.npy"\nv = "v.npy"\n')
    with pytest.raises(ValueError, match="not Hermitian"):
        load_model_file(f)


def test_npz_without_v_and_dense_npz_as_single_matrix(tmp_path):
    np.savez(tmp_path / "only_h0.npz", h0=np.eye(2))
    with pytest.raises(ValueError, match="no array.*v"):
        load_model_file(write(tmp_path / "a.toml", '[model]\nmatrices = "only_h0.npz"\n'))
    np.savez(tmp_path / "h0.npz", a=np.eye(2))
    np.save(tmp_path / "v.npy", np.eye(2))
    with pytest.raises(ValueError, match="not a scipy.sparse"):
        load_model_file(write(tmp_path / "b.toml", '[model]\nh0 = "h0.npz"\nv = "v.npy"\n'))
