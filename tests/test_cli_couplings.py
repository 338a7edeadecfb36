"""``ptcheck check`` for a model with two couplings: verdict at the point, boundary on its ray, region map.

Physics: H = diag(−Δ/2, Δ/2) + λ1 σx + λ2 σz, ground level E = −sqrt((Δ/2 − λ2)² + λ1²) (two-level eigenvalues,
any QM text).  The verdict at a point is checked against brute force: the error of the series on a fine grid
of the straight path from the origin to the point (common practice, no source).
"""

import json

import numpy as np
import pytest
import sympy as sy

from ptcheck.cli import main

DELTA = 1.0
SX = np.array([[0.0, 1.0], [1.0, 0.0]])
SZ = np.diag([1.0, -1.0])


def _series_error_on_path(point, order, samples=400):
    """max over the path of |E_order − E_exact| / |E_exact − E0| (closed-form series from sympy)."""
    l1, l2, t = sy.symbols("l1 l2 t")
    e = -sy.sqrt((sy.Rational(1, 2) - l2) ** 2 + l1**2)
    ser = sy.lambdify(t, sy.series(e.subs({l1: t * point[0], l2: t * point[1]}), t, 0, order + 1).removeO())
    ts = np.linspace(1e-3, 1.0, samples)
    exact = -np.sqrt((0.5 - ts * point[1]) ** 2 + (ts * point[0]) ** 2)
    return np.max(np.abs(ser(ts) - exact) / np.abs(exact + 0.5))


@pytest.fixture
def files(tmp_path):
    np.save(tmp_path / "h0.npy", np.diag([-DELTA / 2, DELTA / 2]))
    np.save(tmp_path / "vx.npy", SX)
    np.save(tmp_path / "vz.npy", SZ)

    def toml(point, orders=(2,), rtol=0.01):
        f = tmp_path / "tl2.toml"
        f.write_text(f"""
[model]
h0 = "h0.npy"
v = ["vx.npy", "vz.npy"]
coupling_names = ["x", "z"]
[check]
levels = [0]
orders = {list(orders)}
couplings = {list(point)}
rtol = {rtol}
""")
        return f

    return tmp_path, toml


@pytest.mark.parametrize("point", [(0.05, 0.04), (0.3, 0.2)])
def test_verdict_at_the_point_matches_brute_force(files, point, capsys):
    tmp, toml = files
    out = tmp / "out"
    code = main(["check", str(toml(point)), "--out", str(out)])
    valid = _series_error_on_path(point, 2) <= 0.01
    assert code == (0 if valid else 1)
    d = json.loads((out / "report.json").read_text())
    assert d["point"] == list(point) and d["coupling_names"] == ["x", "z"]
    (v,) = d["verdicts"]
    assert v["status"] == ("valid" if valid else "not valid")
    exact = -np.sqrt((0.5 - point[1]) ** 2 + point[0] ** 2)
    assert v["exact"] == pytest.approx(exact, rel=1e-12)
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == [
        "region-1-n-0.png", "regions.csv", "report.json", "report.md"]
    md = (out / "report.md").read_text()
    assert "## Region map" in md and "boundary on the ray through the point" in md
    assert ("VALID" if valid else "NOT VALID") in capsys.readouterr().out


def test_boundary_along_the_ray_matches_brute_force(files):
    # the boundary on the ray through the point: first t where the relative error of order 2 exceeds 1 %
    tmp, toml = files
    point = (0.1, 0.08)
    out = tmp / "out"
    main(["check", str(toml(point)), "--out", str(out)])
    (v,) = json.loads((out / "report.json").read_text())["verdicts"]
    t_star = v["boundary"]
    below = _series_error_on_path(tuple(0.99 * t_star * np.asarray(point)), 2)
    above = _series_error_on_path(tuple(1.01 * t_star * np.asarray(point)), 2)
    assert below <= 0.01 < above
    np.testing.assert_allclose(v["boundary_point"], t_star * np.asarray(point))


def test_builtin_molecule_and_flag_point(tmp_path):
    f = tmp_path / "mol.toml"
    f.write_text("""
[model]
builtin = "polar_molecule"
[model.params]
j_max = 3
[check]
orders = [2]
""")
    out = tmp_path / "o"
    code = main(["check", str(f), "--couplings", "0.5", "0.5", "--out", str(out), "--no-figures", "--format", "json"])
    assert code in (0, 1)
    d = json.loads((out / "report.json").read_text())
    assert d["coupling_names"] == ["E", "B"] and d["point"] == [0.5, 0.5]
    assert [p.name for p in out.iterdir() if not p.name.startswith(".")] == ["report.json"]


def test_npz_archive_with_several_v(tmp_path):
    np.savez(tmp_path / "m.npz", h0=np.diag([-0.5, 0.5]), v1=SX, v2=SZ)
    out = tmp_path / "o"
    code = main(["check", str(tmp_path / "m.npz"), "--couplings", "0.05", "0.0", "--out", str(out), "--format", "json"])
    assert code == 0
    assert json.loads((out / "report.json").read_text())["coupling_names"] == ["λ1", "λ2"]


def test_bad_input_is_one_line(files, capsys):
    tmp, toml = files
    f = toml((0.1, 0.1))
    assert main(["check", str(f), "--coupling", "0.1", "--out", str(tmp / "o1")]) == 2
    assert "give the point with --couplings" in capsys.readouterr().err
    f.write_text(f.read_text().replace("couplings = [0.1, 0.1]", ""))
    assert main(["check", str(f), "--out", str(tmp / "o2")]) == 2
    assert "no coupling point given" in capsys.readouterr().err
    f.write_text(f.read_text().replace("[check]", "[check]\ncouplings = [0.1]"))
    assert main(["check", str(f), "--out", str(tmp / "o3")]) == 2
    assert "couplings must be a list of 2 numbers" in capsys.readouterr().err
    one = tmp / "one.toml"
    one.write_text('[model]\nbuiltin = "two_level"\n[check]\ncouplings = [0.1, 0.2]\n')
    assert main(["check", str(one), "--out", str(tmp / "o4")]) == 2
    assert "is for models with several couplings" in capsys.readouterr().err


def test_one_coupling_only_flags_are_refused(files, capsys):
    tmp, toml = files
    f = toml((0.1, 0.1))
    assert main(["check", str(f), "--reference", "bounds", "--out", str(tmp / "o5")]) == 2
    assert "--reference bounds: not available for a model with several couplings" in capsys.readouterr().err
    assert main(["check", str(f), "--rtol", "0.01", "0.05", "--out", str(tmp / "o6")]) == 2
    assert "give one tolerance for a model with several couplings" in capsys.readouterr().err
