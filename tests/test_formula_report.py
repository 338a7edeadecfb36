"""``ptcheck check ... --formula``: formula.tex, formula.py and the figures of a report.

Physics: a two-level system H = diag(-Δ/2, Δ/2) + λ v σx; its ground level is
E = -√((Δ/2)² + λ²v²) (any QM text), whose binomial series is
-Δ/2 - λ²v²/Δ + λ⁴v⁴/Δ³ - … (the Rayleigh–Schrödinger series of that level).
"""

import json
import math
import re
from decimal import ROUND_DOWN, Decimal

import numpy as np
import pytest
from matplotlib.mathtext import MathTextParser
from scipy.optimize import brentq

import ptcheck
from ptcheck import Model
from ptcheck.cli import main
from ptcheck.formula_report import ReportFormulas, report_formulas
from ptcheck.report import run_check, write_report

DELTA, V = 1.0, 0.2
RTOL = 0.01


def exact_ground(lam):
    return -math.sqrt((DELTA / 2) ** 2 + (lam * V) ** 2)


def binomial_series(lam, order):
    # -Δ/2 √(1 + x), x = (2λv/Δ)²: Σ_j binom(1/2, j) x^j, truncated at λ^order
    x = (2 * lam * V / DELTA) ** 2
    total, c = 0.0, 1.0
    for j in range(order // 2 + 1):
        total += c * x**j
        c *= (0.5 - j) / (j + 1)
    return -DELTA / 2 * total


def sig3_down(x):
    d = Decimal(repr(abs(x)))
    return f"{float(d.quantize(Decimal(1).scaleb(d.adjusted() - 2), rounding=ROUND_DOWN)):.3g}"


def load_functions(source):
    ns = {}
    exec(compile(source, "formula.py", "exec"), ns)  # noqa: S102 - the file under test
    return ns


@pytest.fixture(scope="module")
def cli_report(tmp_path_factory):
    d = tmp_path_factory.mktemp("formula-cli")
    toml = d / "tl.toml"
    toml.write_text(f"""
[model]
builtin = "two_level"
[model.params]
delta = {DELTA}
v = {V}
[check]
levels = ["g"]
orders = [2, 4, "pade2/2"]
coupling = 0.25
rtol = {RTOL}
""", encoding="utf-8")
    status = main(["check", str(toml), "--formula", "--out", str(d / "rep")])
    return status, d / "rep"


def test_check_with_formula_writes_tex_py_and_figures(cli_report):
    status, out = cli_report
    assert status == 0
    names = {p.name for p in out.iterdir()}
    assert {"formula.tex", "formula.py", "formula-1-g-order2.png", "formula-2-g-order4.png"} <= names
    md = (out / "report.md").read_text(encoding="utf-8")
    assert "## Formulas" in md and "](formula-1-g-order2.png)" in md
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    assert "formula.tex" in d["files"] and "formula-2-g-order4.png" in [f["file"] for f in d["figures"]]


def test_formula_py_is_the_series_and_its_range_is_the_reports_boundary(cli_report):
    # reference: the binomial series of the closed-form ground energy (two-level, any QM text); the
    # boundaries of report.json (the check itself) for "the range is the report's boundary"
    _, out = cli_report
    ns = load_functions((out / "formula.py").read_text(encoding="utf-8"))
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    bounds = {b["order"]: b["coupling"] for b in d["boundaries"] if isinstance(b["order"], int)}
    for order, name in ((2, "energy_g_order2"), (4, "energy_g_order4")):
        fn = ns[name]
        for lam in (-0.7, 0.1, 0.25, 1.3):
            assert fn(lam) == pytest.approx(binomial_series(lam, order), rel=1e-12)
        (entry,) = [f for f in d["formulas"]["formulas"] if f["order"] == order]
        assert entry["ranges"][0]["upper"] == bounds[order]
        assert f"for 0 ≤ lam < {sig3_down(bounds[order])}" in fn.__doc__
    assert any("Padé" in s for s in d["formulas"]["skipped"])


def test_printed_range_against_brute_force(cli_report):
    # brute force: the exported order-2 function against the closed form on a fine grid + brentq
    _, out = cli_report
    fn = load_functions((out / "formula.py").read_text(encoding="utf-8"))["energy_g_order2"]

    def excess(lam):
        e = exact_ground(lam)
        return abs(fn(lam) - e) / abs(e + DELTA / 2) - RTOL

    grid = np.linspace(1e-3, 2.0, 800)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    assert i > 0 and np.all(vals[:i] <= 0)
    lam_bf = brentq(excess, grid[i - 1], grid[i], xtol=1e-12)
    tex = (out / "formula.tex").read_text(encoding="utf-8")
    printed = float(re.search(r"0 \\leq \\lambda < ([0-9.]+)\$", tex).group(1))  # the first formula: order 2
    # three digits rounded toward 0, of a boundary known to xrtol = 1e-3
    assert lam_bf * (1 - 1.2e-2) <= printed <= lam_bf * (1 + 2e-3)


def test_formula_tex_lines_parse_with_mathtext(cli_report):
    # reference: matplotlib's mathtext parser; every non-comment line is one formula or one matrix entry
    _, out = cli_report
    lines = [ln for ln in (out / "formula.tex").read_text(encoding="utf-8").splitlines() if ln and not ln.startswith("%")]
    assert len(lines) == 2
    parser = MathTextParser("agg")
    for ln in lines:
        parser.parse(ln, dpi=72)
    assert "no formula: g, Padé[2/2]" in (out / "formula.tex").read_text(encoding="utf-8")


def test_no_figures_keeps_tex_and_py(tmp_path):
    toml = tmp_path / "m.toml"
    np.savez(tmp_path / "m.npz", h0=np.diag([-DELTA / 2, DELTA / 2]), v=np.array([[0.0, V], [V, 0.0]]))
    toml.write_text('[model]\nmatrices = "m.npz"\n[check]\ncoupling = 0.25\n', encoding="utf-8")
    assert main(["check", str(toml), "--formula", "--no-figures", "--format", "json", "--out", str(tmp_path / "r")]) == 0
    assert sorted(p.name for p in (tmp_path / "r").iterdir() if not p.name.startswith(".")) == ["formula.py", "formula.tex", "report.json"]


def test_skipped_targets_say_why_and_names_stay_unique():
    # invented: a degenerate pair at 0 coupled to a level at 5 (its H_eff is not diagonal in its good
    # states, so the difference of its two levels has no scalar series)
    m = Model(np.diag([0.0, 0.0, 5.0]), [[0, 1, 1], [1, 0, 0], [1, 0, 0]], name="invented three-level")
    rep = run_check(m, [0, 2, ptcheck.exchange(1, 0)], [2], coupling=0.1, rtol=0.05)
    fx = report_formulas(rep)
    assert isinstance(fx, ReportFormulas)
    assert [f.target for f in fx.formulas] == ["n=0", "n=2"]
    assert fx.formulas[0].kind == "effective_hamiltonian" and fx.formulas[0].treatment == "degenerate"
    assert fx.function_names == ("effective_hamiltonian", "energy")
    assert len(fx.skipped) == 1 and "no single polynomial formula" in fx.skipped[0]
    ns = load_functions(fx.python())
    assert np.asarray(ns["effective_hamiltonian"](0.1)).shape == (2, 2)
    # the ranges are the report's boundaries (same treatment, tolerance, coupling of interest, direction)
    for f, b in zip(fx.formulas, rep.boundaries[:2]):
        assert f.ranges[0].upper == b.coupling and len(f.ranges[0].boundaries) == 1


def test_write_report_without_formulas_writes_none(tmp_path):
    m = ptcheck.models.two_level(delta=DELTA, v=V)
    rep = run_check(m, ["g"], [2], coupling=0.25)
    files = write_report(rep, tmp_path / "r", formats=("json",), figures=False)
    assert [p.name for p in files] == ["report.json"]
