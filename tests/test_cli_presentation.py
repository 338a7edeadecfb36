"""Command-line presentation options (figure format, sweep, threshold, convergence order, several tolerances) and the demo.

Physics referee as in tests/test_cli.py: the two-level ground level E = -√((Δ/2)² + λ²v²)
(any QM text) and its second-order value -Δ/2 - λ²v²/Δ; the validity boundary of
order 2 is the root of their difference minus the tolerance.
"""

import json
import math

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck.cli import main

DELTA, V = 1.0, 0.2


def boundary(tol):
    f = lambda x: abs(-DELTA / 2 - (x * V) ** 2 / DELTA + math.sqrt((DELTA / 2) ** 2 + (x * V) ** 2)) - tol  # noqa: E731
    return brentq(f, 1e-3, 0.99 * DELTA / (2 * V))


@pytest.fixture
def toml(tmp_path):
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
coupling = 0.45
treatment = "nondegenerate"
""", encoding="utf-8")
    return f


def test_check_presentation_options_reach_the_report(toml, tmp_path):
    out = tmp_path / "rep"
    status = main(["check", str(toml), "--tol", "1e-5", "1e-4", "--sweep", "0.1", "0.6", "6", "--threshold", "0.2",
                   "--convergence-order", "12", "--figure-format", "svg", "--out", str(out)])
    assert status == 1  # order 2 misses 1e-5 at λ = 0.45 (boundary ≈ 0.30, closed form)
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    s = d["settings"]
    assert s["tol"] == 1e-5 and s["other_tolerances"] == [1e-4]
    assert s["threshold"] == 0.2 and s["convergence_order"] == 12 and s["sweep"] == [0.1, 0.6, 6]
    assert d["comparison"]["couplings"] == pytest.approx(sorted(set(np.linspace(0.1, 0.6, 6).tolist()) | {0.45}))
    assert d["boundaries"][0]["coupling"] == pytest.approx(boundary(1e-5), rel=2e-3)
    assert d["other_boundaries"][0]["coupling"] == pytest.approx(boundary(1e-4), rel=2e-3)
    assert d["convergence"][0]["order"] == 12
    figures = [f["file"] for f in d["figures"]]
    assert figures and all(name.endswith(".svg") for name in figures)
    assert all((out / name).read_bytes().startswith(b"<?xml") for name in figures)
    md = (out / "report.md").read_text(encoding="utf-8")
    assert all(f"]({name})" in md for name in figures)


@pytest.mark.parametrize("sweep", [["0.5", "0.1", "5"], ["0", "1", "2"], ["a", "1", "5"]])
def test_bad_sweep_is_bad_input(toml, tmp_path, capsys, sweep):
    assert main(["check", str(toml), "--sweep", *sweep, "--out", str(tmp_path / "r"), "--no-figures"]) == 2
    err = capsys.readouterr().err
    assert "--sweep" in err and " ".join(sweep) in err


def test_demo_reads_as_a_design_check(tmp_path):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out), "--no-map", "--figure-format", "pdf"]) == 0
    md = (out / "report.md").read_text(encoding="utf-8")
    assert "Design check" in md and "Question" not in md and "Invented scenario" in md
    pdfs = sorted(p.name for p in out.glob("*.pdf"))
    assert pdfs and not list(out.glob("*.png"))
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    assert d["settings"]["orders"] == [2, 4] and d["settings"]["other_tolerances"] == [0.05]
    # several tolerances in one run: every target × order has a boundary at 5 % too
    assert len(d["other_boundaries"]) == len(d["boundaries"]) == 4
