"""The command line end to end (``python -m ptcheck`` in a subprocess), exit statuses and report files.

Physics: a two-level system H = diag(-Δ/2, Δ/2) + λ v σx, whose ground level is
E = -√((Δ/2)² + λ²v²) (any QM text) and whose second-order RS value is
-Δ/2 - λ²v²/Δ (the first terms of the binomial series of that square root).
"""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck.cli import main
from ptcheck.compare import validity_boundary
from ptcheck.models import two_level

ROOT = Path(__file__).resolve().parents[1]
DELTA, V = 1.0, 0.2
TOL = 1e-5


def exact_ground(lam):
    return -math.sqrt((DELTA / 2) ** 2 + (lam * V) ** 2)


def second_order_ground(lam):
    return -DELTA / 2 - (lam * V) ** 2 / DELTA


def run_cli(*args, cwd):
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    env.pop("COLUMNS", None)
    return subprocess.run(
        [sys.executable, "-m", "ptcheck", *map(str, args)], cwd=cwd, env=env, capture_output=True, text=True,
        timeout=240, stdin=subprocess.DEVNULL,
    )


def builtin_toml(tmp_path, coupling):
    f = tmp_path / "tl.toml"
    f.write_text(f"""
[model]
builtin = "two_level"
[model.params]
delta = {DELTA}
v = {V}
[check]
levels = ["g"]
orders = [2]
coupling = {coupling}
tol = {TOL}
treatment = "nondegenerate"
""", encoding="utf-8")
    return f


def one_error_line(stderr):
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, stderr
    assert lines[0].startswith("ptcheck: error: ") and "Traceback" not in stderr
    return lines[0]


# ---------------------------------------------------------------------- valid / not valid
def test_check_builtin_valid_exit_0_and_json_round_trip(tmp_path):
    f = builtin_toml(tmp_path, 0.25)
    r = run_cli("check", f, "--out", tmp_path / "rep", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith("VALID") and "report:" in r.stdout
    d = json.loads((tmp_path / "rep" / "report.json").read_text(encoding="utf-8"))
    (v,) = d["verdict"]["per_target"]
    # error at λ against the closed form (two-level, any QM text)
    assert v["error"] == pytest.approx(abs(second_order_ground(0.25) - exact_ground(0.25)), rel=1e-9)
    assert v["valid"] is True and d["verdict"]["exit_status"] == 0
    # key fields equal the engine's values computed in this process
    b = validity_boundary(two_level(delta=DELTA, v=V), "g", 2, tol=TOL, treatment="nondegenerate")
    assert d["boundaries"][0]["coupling"] == pytest.approx(b.coupling, rel=1e-12)
    assert d["settings"]["tol"] == TOL and d["settings"]["orders"] == [2]  # orders as numbers in the JSON report
    assert d["model"]["builder"] == "two_level" and d["model"]["params"] == {"delta": DELTA, "v": V}
    names = {p.name for p in (tmp_path / "rep").iterdir()}
    assert {"report.md", "report.json", "comparison.csv", "boundaries.csv"} <= names
    assert any(n.endswith(".png") for n in names)


def test_check_npy_pair_not_valid_exit_1(tmp_path):
    np.save(tmp_path / "h0.npy", np.diag([-DELTA / 2, DELTA / 2]))
    np.save(tmp_path / "v.npy", np.array([[0.0, V], [V, 0.0]]))
    f = tmp_path / "m.toml"
    f.write_text('[model]\nh0 = "h0.npy"\nv = "v.npy"\n', encoding="utf-8")
    r = run_cli("check", f, "--levels", "0", "--orders", "2", "--coupling", 0.45, "--tol", TOL,
                "--treatment", "nondegenerate", "--no-figures", "--format", "json", "--out", "rep", cwd=tmp_path)
    assert r.returncode == 1, r.stderr
    assert r.stdout.startswith("NOT VALID")
    d = json.loads((tmp_path / "rep" / "report.json").read_text(encoding="utf-8"))
    assert d["verdict"]["per_target"][0]["error"] == pytest.approx(
        abs(second_order_ground(0.45) - exact_ground(0.45)), rel=1e-9)
    assert d["model"]["source"]["kind"] == "npy"
    assert sorted(p.name for p in (tmp_path / "rep").iterdir()) == ["report.json"]


def test_check_dense_npz_and_sparse_npz(tmp_path):
    h0, v = np.diag([-DELTA / 2, DELTA / 2]), np.array([[0.0, V], [V, 0.0]])
    np.savez(tmp_path / "dense.npz", h0=h0, v=v)
    r = run_cli("check", "dense.npz", "--coupling", 0.25, "--tol", TOL, "--treatment", "nondegenerate",
                "--no-figures", "--format", "json", "csv", "--out", "d", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    sp.save_npz(tmp_path / "h0.npz", sp.csr_matrix(h0))
    sp.save_npz(tmp_path / "v.npz", sp.csr_matrix(v))
    (tmp_path / "s.toml").write_text('[model]\nh0 = "h0.npz"\nv = "v.npz"\n[check]\ncoupling = 0.45\n', encoding="utf-8")
    r = run_cli("check", "s.toml", "--tol", TOL, "--treatment", "nondegenerate", "--no-figures", "--format", "json",
                "--out", "s", cwd=tmp_path)
    assert r.returncode == 1, r.stderr
    d = json.loads((tmp_path / "s" / "report.json").read_text(encoding="utf-8"))
    assert d["model"]["source"]["kind"] == "sparse-npz"
    assert d["comparison"]["exact"][0][d["settings"]["comparison_couplings"].index(0.45)] == pytest.approx(
        exact_ground(0.45), rel=1e-12)


# ---------------------------------------------------------------------- bad input: exit 2, one line
def test_bad_file_in_a_subprocess_gives_one_line_and_exit_2(tmp_path):
    (tmp_path / "bad.toml").write_text("[model\nbuiltin = 1", encoding="utf-8")
    r = run_cli("check", "bad.toml", "--coupling", 0.1, cwd=tmp_path)
    assert r.returncode == 2 and "not valid TOML" in one_error_line(r.stderr)
    assert r.stdout == ""


def test_missing_and_non_hermitian_files(tmp_path, capsys):
    assert main(["check", str(tmp_path / "missing.toml"), "--coupling", "0.1"]) == 2
    assert "does not exist" in one_error_line(capsys.readouterr().err)
    np.save(tmp_path / "h0.npy", np.diag([0.0, 1.0]))
    np.save(tmp_path / "v.npy", np.array([[0.0, 0.3], [0.1, 0.0]]))
    (tmp_path / "nh.toml").write_text('[model]\nh0 = "h0.npy"\nv = "v.npy"\n', encoding="utf-8")
    assert main(["check", str(tmp_path / "nh.toml"), "--coupling", "0.1"]) == 2
    assert "not Hermitian" in one_error_line(capsys.readouterr().err)
    np.save(tmp_path / "v.npy", np.eye(3))
    assert main(["check", str(tmp_path / "nh.toml"), "--coupling", "0.1"]) == 2
    assert "same shape" in one_error_line(capsys.readouterr().err)


@pytest.mark.parametrize(
    "toml, args, match",
    [
        ('[model]\nbuiltin = "no_such_model"\n', ["--coupling", "0.1"], "unknown built-in model"),
        ('[model]\nbuiltin = "two_level"\n', [], "no coupling given"),
        ('[model]\nbuiltin = "two_level"\n', ["--coupling", "0.1", "--levels", "(1,0)"], "unknown level"),
        ('[model]\nbuiltin = "two_level"\n', ["--coupling", "0.1", "--orders", "x"], "order must be"),
        ('[model]\nbuiltin = "two_level"\n', ["--coupling", "0.1", "--quantity", "f = e e"], "cannot read quantity"),
        ('[model]\nbuiltin = "two_level"\n', ["--coupling", "0.1", "--rtol", "-1"], "rtol"),
        ('[model]\nbuiltin = "two_level"\n', ["--coupling", "0.1", "--backend", "gpu"], "backend must be one of"),
    ],
)
def test_bad_input_in_process(tmp_path, capsys, toml, args, match):
    f = tmp_path / "m.toml"
    f.write_text(toml, encoding="utf-8")
    assert main(["check", str(f), "--out", str(tmp_path / "o"), "--no-figures", *args]) == 2
    assert match in one_error_line(capsys.readouterr().err)


def test_argparse_errors_and_help_statuses(capsys):
    assert main(["check"]) == 2  # MODEL missing
    assert main(["check", "m.toml", "--tol", "1", "--rtol", "1"]) == 2  # mutually exclusive
    assert main(["frobnicate"]) == 2
    assert main([]) == 2
    capsys.readouterr()
    assert main(["check", "--help"]) == 0
    out = capsys.readouterr().out
    assert "exit status: 0 valid, 1 not valid, 2 bad input" in out and "[model]" in out
    assert main(["models"]) == 0
    assert "two_level" in capsys.readouterr().out


# ---------------------------------------------------------------------- report files
def test_refuses_to_overwrite_a_different_report(tmp_path, capsys):
    f = builtin_toml(tmp_path, 0.25)
    out = tmp_path / "rep"
    base = ["check", str(f), "--out", str(out), "--no-figures", "--format", "json"]
    assert main(base) == 0
    assert main(base) == 0  # same content again: fine
    capsys.readouterr()
    assert main(base + ["--coupling", "0.45"]) == 2
    assert "--force" in one_error_line(capsys.readouterr().err)
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.25
    assert main(base + ["--coupling", "0.45", "--force"]) == 1
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.45


def test_interrupted_write_leaves_no_partial_report(tmp_path, capsys, monkeypatch):
    f = builtin_toml(tmp_path, 0.25)
    real = os.replace

    def interrupted(src, dst):
        if str(dst).endswith("report.json"):
            raise KeyboardInterrupt
        real(src, dst)

    monkeypatch.setattr("ptcheck._atomic.os.replace", interrupted)
    assert main(["check", str(f), "--out", str(tmp_path / "rep"), "--no-figures"]) == 130
    assert "interrupted" in one_error_line(capsys.readouterr().err)
    assert not (tmp_path / "rep" / "report.json").exists()
    assert not [p for p in (tmp_path / "rep").iterdir() if p.name.startswith(".")]


def test_serializer_raising_midway_writes_nothing(tmp_path, monkeypatch):
    f = builtin_toml(tmp_path, 0.25)

    def broken_dumps(*a, **k):
        raise RuntimeError("serializer died midway")

    monkeypatch.setattr("ptcheck.report.json.dumps", broken_dumps)
    with pytest.raises(RuntimeError):
        main(["check", str(f), "--out", str(tmp_path / "rep"), "--no-figures"])
    assert not (tmp_path / "rep").exists() or not list((tmp_path / "rep").iterdir())


# ---------------------------------------------------------------------- demo
def test_demo_writes_report_with_figures(tmp_path):
    r = run_cli("demo", "--out", "demo", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "demo"
    md = (out / "report.md").read_text(encoding="utf-8")
    assert "Invented scenario" in md and "Q-17" in md
    assert "## Verdict" in md and "## Cautions" in md
    pngs = sorted(p.name for p in out.glob("*.png"))
    assert "validity-map.png" in pngs and len(pngs) >= 3
    for name in pngs:
        assert f"]({name})" in md
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    assert d["invented"] is True and d["validity_map"]["param_name"] == "omega_r"
    assert str(Path("demo") / "report.md") in r.stdout
