"""The panels' "export formula" button: the formula of the level shown, with the panel's tolerance.

Physics: a two-level system H = diag(-Δ/2, Δ/2) + λ v σx; its ground level is E = -√((Δ/2)² + λ²v²)
(any QM text), whose binomial series -Δ/2 - λ²v²/Δ + λ⁴v⁴/Δ³ - … is the Rayleigh–Schrödinger series.
"""

from decimal import ROUND_DOWN, Decimal

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck.models import two_level
from ptcheck.widgets import ErrorsPanel

DELTA, V = 1.0, 0.2
OPTS = dict(coupling_range=(0.0, 2.0), n_points=17, orders=(2, 4, "pade2/2"), raise_errors=True, canvas="image")


def exact_ground(lam):
    # two-level system diag(−Δ/2, Δ/2) + λ v σx: E = −√((Δ/2)² + λ²v²) (any QM text)
    return -np.sqrt((DELTA / 2) ** 2 + (lam * V) ** 2)


def load(path, name):
    ns = {}
    exec(compile(path.read_text(encoding="utf-8"), str(path), "exec"), ns)  # noqa: S102 - the file under test
    return ns[name]


@pytest.fixture
def panel():
    p = ErrorsPanel(two_level(delta=DELTA, v=V), levels=["g"], rtol=0.01, treatment="nondegenerate",
                    **OPTS)
    yield p
    p.close()


def test_export_formula_writes_tex_py_and_figure(panel, tmp_path):
    tex, py, fig = panel.export_formula(tmp_path / "f")
    assert [p.suffix for p in (tex, py, fig)] == [".tex", ".py", ".png"]
    assert all(p.exists() and p.stat().st_size > 0 for p in (tex, py, fig))
    assert tex.name == "ptcheck_formula_two_level_system_g_order4.tex"  # the highest integer order selected
    # −Δ/2 − λ²v²/Δ + λ⁴v⁴/Δ³: the binomial series of the closed form (any QM text)
    fn = load(py, "energy")
    for lam in (-0.6, 0.3, 1.7):
        assert fn(lam) == pytest.approx(-0.5 - 0.04 * lam**2 + 0.0016 * lam**4, rel=1e-12)
    assert "1/625*lam**4" in py.read_text(encoding="utf-8")


def test_export_formula_range_is_the_panels_boundary_and_the_brute_force_one(panel, tmp_path):
    _, py, _ = panel.export_formula(tmp_path, order=2)
    (b,) = [b for b in panel.boundaries if b.order == 2]
    fn = load(py, "energy")
    assert b.status == "found"
    # the range printed is the panel's boundary, three digits rounded toward 0
    d = Decimal(repr(abs(b.coupling)))
    printed = f"{float(d.quantize(Decimal(1).scaleb(d.adjusted() - 2), rounding=ROUND_DOWN)):.3g}"
    assert f"valid to 1 % for 0 ≤ lam < {printed}  (relative error" in fn.__doc__

    # brute force: the written function against the closed form on a fine grid + brentq (relative to the shift)
    def excess(lam):
        e = exact_ground(lam)
        return abs(fn(lam) - e) / abs(e + DELTA / 2) - 0.01

    grid = np.linspace(1e-3, 2.0, 800)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    assert i > 0 and np.all(vals[:i] <= 0)
    lam_bf = brentq(excess, grid[i - 1], grid[i], xtol=1e-12)
    assert abs(b.coupling) == pytest.approx(lam_bf, rel=2e-3)


def test_formula_button_reports_the_files(panel, tmp_path):
    panel.controls.folder.value = str(tmp_path)
    panel.controls.formula_button.click()
    assert "written:" in panel.controls.export_status.value
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "ptcheck_formula_two_level_system_g_order4.png", "ptcheck_formula_two_level_system_g_order4.py",
        "ptcheck_formula_two_level_system_g_order4.tex"]


def test_only_pade_selected_is_a_message(panel, tmp_path):
    from ptcheck.approximants import parse_order

    panel.controls.orders.value = (parse_order("pade2/2"),)
    panel.raise_errors = False
    panel.controls.folder.value = str(tmp_path)
    panel.controls.formula_button.click()
    assert "select an integer order" in panel.controls.export_status.value
    assert not list(tmp_path.iterdir())
