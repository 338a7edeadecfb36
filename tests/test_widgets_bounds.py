"""Panels with certified bounds: the reference control, bands in the figures, certified verdicts, brackets.

The verdict of a panel judged by certified bounds is a default answer, so it is
refereed by brute force: a closed-form two-level model and an invented
six-level model solved with dense ``numpy.linalg.eigvalsh`` on a fine grid +
brentq.  Every test fails if a widget callback swallowed an exception.
"""

import logging
import re

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from conftest import two_level_rs2_boundary

from ptcheck import Model, validity_boundary
from ptcheck._format import fmt_certified_range, fmt_toward
from ptcheck.errors import NearDegenerateWarning
from ptcheck.exact import ExactSolver
from ptcheck.models import spin_chain
from ptcheck.widgets import Dashboard, ErrorsPanel, LevelsPanel

OPTS = dict(n_points=21, raise_errors=True, canvas="image", treatment="nondegenerate")


@pytest.fixture(autouse=True)
def no_swallowed_callback_errors(caplog):
    """Fail any test in which a widget callback raised and ipywidgets only logged it."""
    caplog.set_level(logging.WARNING)
    yield
    assert [r.getMessage() for r in caplog.records if "Exception in callback" in r.getMessage()] == []


def two_level(v: float = 0.5) -> Model:
    return Model(np.diag([-0.5, 0.5]), [[0.0, v], [v, 0.0]], name="two-level")




E0_SIX = np.array([0.0, 1.0, 1.7, 2.6, 3.1, 4.0])


def six_level() -> Model:
    """An invented six-level model: distinct unperturbed energies, a dense real symmetric V (made-up numbers)."""
    a = np.random.default_rng(7).normal(size=(6, 6))
    return Model(np.diag(E0_SIX), 0.25 * (a + a.T), name="invented six-level")


def six_level_boundary(rtol: float) -> float:
    """Brute-force λ* of order-2 RS for the ground level of :func:`six_level`.

    Exact: lowest eigenvalue of H0 + λV by dense ``numpy.linalg.eigvalsh`` (no level crossing for the ground
    level of a real symmetric family without symmetry); RS to order 2 from the textbook sum
    E0 + λV00 + λ² Σ_n |V0n|²/(E0 − En) (Sakurai 1994, eq. 5.1.44).  Fine grid + brentq.
    """
    v = six_level().v  # H0 is diagonal and sorted: the work basis is the basis the matrices were given in
    e2 = sum(v[0, n] ** 2 / (E0_SIX[0] - E0_SIX[n]) for n in range(1, 6))

    def excess(lam: float) -> float:
        e = np.linalg.eigvalsh(np.diag(E0_SIX) + lam * v)[0]
        return abs(lam * v[0, 0] + lam**2 * e2 - (e - E0_SIX[0])) / abs(e - E0_SIX[0]) - rtol

    grid = np.linspace(1e-4, 1.5, 15001)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    assert vals[i] > 0 and vals[i - 1] <= 0
    return brentq(excess, grid[i - 1], grid[i], xtol=1e-12)


def plain(html_text: str) -> str:
    return re.sub(r"<[^>]+>", " ", html_text).replace("&#x27;", "'")


# ---------------------------------------------------------------- the reference control
def test_switching_the_reference_recomputes_and_draws_bands():
    p = ErrorsPanel(two_level(), levels=[0], orders=(2, 4), rtol=0.01, coupling_range=(0.0, 2.0), **OPTS)
    try:
        assert p.controls.reference.value == "auto" and p.settings.reference == "exact"
        assert p.artists.bands == () and p.result.error_lower is None
        heavy = p.heavy_computations
        p.controls.reference.value = "both"
        assert p.settings.reference == "both" and p.result.reference == "both"
        assert p.heavy_computations > heavy  # a new sweep and the certified boundaries
        r, a = p.result, p.artists
        assert len(a.bands) == 2 and a.exact_known
        # the band drawn is the certified bracket of the relative error (log axis: positive values only)
        for oi in range(2):
            lo, hi = a.band_edges[oi]
            up, low = r.rel_error_upper[0, oi], r.rel_error_lower[0, oi]
            assert_allclose(hi.get_ydata(), np.where(np.isfinite(up) & (up > 0), up, np.nan))
            assert_allclose(np.asarray(lo.get_ydata())[low > 0], low[low > 0])
        # the exact error lies inside its certified bracket at every sweep point
        inside = (r.error_lower <= r.abs_error * (1 + 1e-9) + 1e-15) & (r.abs_error <= r.error_upper * (1 + 1e-9) + 1e-15)
        assert inside.all()
        assert [ln.get_label() for ln in a.lines] == ["order 2", "order 4"]  # exact curves still named
        assert {b.reference for b in p.boundaries} == {"exact", "bounds"}

        p.controls.reference.value = "bounds"
        r, a = p.result, p.artists
        assert r.reference == "bounds" and r.exact_solves == 0 and not a.exact_known
        assert all(np.isnan(ln.get_ydata()).all() for ln in a.lines)  # no exact error to draw
        assert [pair[1].get_label() for pair in a.band_edges] == ["order 2", "order 4"]  # the brackets name the orders
        assert {b.reference for b in p.boundaries} == {"bounds"}
        assert all(b.exact_solves == 0 for b in p.boundaries)
    finally:
        p.close()


def test_levels_view_shows_the_bracket_of_the_exact_value():
    p = LevelsPanel(two_level(), levels=[0, 1], orders=(2,), coupling_range=(0.0, 1.0), shift=True, reference="both",
                    **OPTS)
    try:
        r, a = p.result, p.artists
        assert len(a.bands) == 2 and a.exact_known
        for ti in range(2):
            lo, hi = a.band_edges[ti]
            assert_allclose(lo.get_ydata(), r.exact_lower[ti] - r.unperturbed[ti])  # shifts, as the figure shows
            assert_allclose(hi.get_ydata(), r.exact_upper[ti] - r.unperturbed[ti])
        # exact two-level levels ±√(¼ + v²λ²) (closed form) lie in the brackets drawn
        lam = r.couplings
        exact = np.array([-np.sqrt(0.25 + 0.25 * lam**2), np.sqrt(0.25 + 0.25 * lam**2)])
        assert np.all(r.exact_lower <= exact + 1e-12) and np.all(exact <= r.exact_upper + 1e-12)
        p.controls.reference.value = "bounds"
        a = p.artists
        assert not a.exact_known and a.legend is not None
        assert "exact" not in [t.get_text() for t in a.legend.get_texts()]  # no exact curve without exact solves
        heavy = p.heavy_computations
        p.set_coupling(0.37)
        # markers on the bracket edges at the exact λ, without engine work
        ys = np.sort(a.coupling_markers.get_ydata())
        lo0 = np.interp(0.37, lam, r.exact_lower[0] - r.unperturbed[0])
        hi1 = np.interp(0.37, lam, p.result.exact_upper[1] - r.unperturbed[1])
        assert_allclose([ys[0], ys[-1]], [lo0, hi1])
        assert p.heavy_computations == heavy
    finally:
        p.close()


def test_auto_reference_uses_bounds_above_the_size_limit():
    m = six_level()  # N = 6
    p = LevelsPanel(m, levels=[0], orders=(2,), coupling_range=(0.0, 0.5), bounds_above=5, **OPTS)
    try:
        assert p.settings.reference == "bounds" and p.result.exact_solves == 0
        assert "above 5 states" in p.controls.reference_hint.value
    finally:
        p.close()
    p = LevelsPanel(m, levels=[0], orders=(2,), coupling_range=(0.0, 0.5), bounds_above=6, **OPTS)
    try:
        assert p.settings.reference == "exact" and p.result.exact_solves > 0
        assert "not above 6 states" in p.controls.reference_hint.value
    finally:
        p.close()


def test_bad_reference_options_are_refused_with_the_choices():
    with pytest.raises(ValueError, match="reference must be one of 'auto', 'exact', 'bounds', 'both'; got 'exakt'"):
        LevelsPanel(two_level(), reference="exakt", **OPTS)
    with pytest.raises(ValueError, match="bounds_above must be an int >= 0; got -1"):
        LevelsPanel(two_level(), bounds_above=-1, **OPTS)
    with pytest.raises(TypeError, match="bounds_above must be an int >= 0; got 2.5"):
        LevelsPanel(two_level(), bounds_above=2.5, **OPTS)


# ---------------------------------------------------------------- no exact solve with bounds
def test_bounds_panel_makes_no_exact_solve(monkeypatch, tmp_path):
    def refuse(*args, **kwargs):
        raise AssertionError("an exact solve was attempted")

    monkeypatch.setattr(ExactSolver, "__init__", refuse)
    d = Dashboard(six_level(), levels=[0, 1], orders=(2, 3), rtol=(0.01, 0.05), coupling_range=(0.0, 0.6),
                  reference="bounds", **OPTS)
    try:
        assert d.errors == [] and d.result.exact_solves == 0
        d.select("errors")
        d.set_coupling(0.3)
        d.controls.tolerance.value = "2"
        d.select("levels")
        assert d.errors == []
        assert d.boundaries and all(b.exact_solves == 0 and b.reference == "bounds" for b in d.boundaries)
        assert all(x.exists() for x in d.export(tmp_path, "png"))
    finally:
        d.close()


# ---------------------------------------------------------------- certified verdicts
def test_banner_follows_decision_at_and_brute_force_on_the_six_level_model():
    lam1, lam5 = six_level_boundary(0.01), six_level_boundary(0.05)
    p = LevelsPanel(six_level(), levels=[0], orders=(2,), rtol=(0.01, 0.05), coupling_range=(0.0, 1.0),
                    reference="bounds", **OPTS)
    try:
        # the certified couplings are those validity_boundary(..., reference="bounds") finds with the panel's options
        mine = {}
        for rt in (0.01, 0.05):
            with pytest.warns(NearDegenerateWarning):  # level 0 mixes with level 3 at λ = 1 (the panel notes it)
                b = validity_boundary(six_level(), 0, 2, rtol=rt, reference="bounds", treatment="nondegenerate",
                                      max_coupling=1.0, coupling=1.0)
            (shown,) = [x for x in p.boundaries if x.rtol == rt]
            assert shown.coupling == b.coupling and shown.certified_not == b.certified_not
            mine[rt] = b
        assert p.verdict.orders[0].reach == (abs(mine[0.01].coupling), abs(mine[0.05].coupling))
        seen = set()
        for lam in np.linspace(0.0, 1.0, 41):
            p.set_coupling(float(lam))
            (line,) = p.verdict.orders
            text = line.text
            for k, rt in enumerate((0.01, 0.05)):
                b, truth = mine[rt], (lam1, lam5)[k]
                d = b.decision_at(lam)
                assert line.certified[k] == d
                assert line.meets[k] == {"valid": True, "not valid": False, "undecided": None}[d]
                # brute force: a certified "valid" lies below the true boundary, a certified failure at or beyond it
                if d == "valid":
                    assert lam < truth
                elif d == "not valid":
                    assert lam >= truth * (1 - 1e-9)
                seen.add(d)
                if d == "valid":
                    assert f"certified valid up to λ = {fmt_toward(b.coupling)}" in text
                elif d == "not valid":
                    assert f"certified NOT valid from λ = {fmt_certified_range(b.coupling, b.certified_not)[1]}" in text
                else:
                    a, z = fmt_certified_range(b.coupling, b.certified_not)
                    assert f"undecided between λ = {a} and {z}" in text
            assert plain(p.banner.value).count(text[:20]) == 1
        assert seen == {"valid", "not valid", "undecided"}
    finally:
        p.close()


def test_certified_coupling_in_the_banner_against_the_closed_form():
    lam1 = two_level_rs2_boundary(0.5, 0.01)
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), rtol=0.01, coupling_range=(0.0, 2.0), reference="bounds",
                    **OPTS)
    try:
        with pytest.warns(NearDegenerateWarning):  # the two levels mix fully at λ = 2 (the panel notes it)
            b = validity_boundary(two_level(), 0, 2, rtol=0.01, reference="bounds", treatment="nondegenerate",
                                  max_coupling=2.0, coupling=2.0)
        assert p.verdict.orders[0].reach == (abs(b.coupling),)
        assert b.coupling <= lam1 * (1 + 1e-9) <= b.certified_not * (1 + 2e-9)  # certified never above the truth
        p.set_coupling(0.9 * b.coupling)
        text = p.verdict.orders[0].text
        shown = re.search(r"certified valid up to λ = ([0-9.]+) \(rigorous\)", text)
        assert shown is not None, text
        assert float(shown.group(1)) <= b.coupling  # printed rounded down: still certified
        assert_allclose(float(shown.group(1)), b.coupling, rtol=1e-2)
        assert "✓" in p.banner.value and "judged by certified bounds, no exact solve" in plain(p.banner.value)
        p.set_coupling(min(1.05 * b.certified_not, 2.0))
        assert p.verdict.orders[0].certified == ("not valid",) and "✗" in p.banner.value
        assert "certified NOT valid from λ =" in p.verdict.orders[0].text
    finally:
        p.close()


def test_both_adds_the_certified_sentence_to_the_exact_one():
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), rtol=0.01, coupling_range=(0.0, 2.0), reference="both",
                    **OPTS)
    try:
        lam = 0.5 * two_level_rs2_boundary(0.5, 0.01)
        p.set_coupling(lam)
        (line,) = p.verdict.orders
        exact_b = [b for b in p.boundaries if b.reference == "exact"]
        cert_b = [b for b in p.boundaries if b.reference == "bounds"]
        assert len(exact_b) == len(cert_b) == 1
        assert line.reach == (abs(exact_b[0].coupling),)  # the exact verdict leads
        assert line.certified == (cert_b[0].decision_at(lam),) == ("valid",)
        assert " Bounds: certified valid up to λ = " in line.text and "λ* =" in line.text
    finally:
        p.close()


def test_conditional_certificates_say_so():
    # an invented chain: 6 spins with made-up site fields; level 0 at 1 % is certified rigorously, its failure only
    # with an estimated gap (found with these options; the wording must follow the boundary's own flags)
    m = spin_chain(n_spins=6, h_z=[0.1 + 0.03 * i for i in range(6)])
    p = LevelsPanel(m, levels=[0], orders=(2,), rtol=0.01, coupling_range=(0.0, 1.5), reference="bounds", **OPTS)
    try:
        (b,) = p.boundaries
        p.set_coupling(0.5 * b.coupling)
        want = "rigorous" if b.rigorous else "conditional on an estimated gap"
        assert f"certified valid up to λ = {fmt_toward(b.coupling)} ({want}" in p.verdict.orders[0].text
        p.set_coupling(min(1.2 * b.certified_not, 1.5))
        want = "rigorous" if b.certified_not_rigorous else "conditional on an estimated gap"
        assert f"({want}; certified valid up to" in p.verdict.orders[0].text
    finally:
        p.close()


def test_refused_certified_boundaries_are_explained_in_panel_words():
    # Padé approximants are not certified: the panel keeps the other orders and says why, without Python syntax
    p = LevelsPanel(two_level(), levels=[0], orders=(2, "pade1/1"), rtol=0.01, coupling_range=(0.0, 1.0),
                    reference="bounds", **OPTS)
    try:
        p.set_coupling(0.5 * two_level_rs2_boundary(0.5, 0.01))
        lines = {o.order: o for o in p.verdict.orders}
        assert lines["order 2"].certified == ("valid",)
        assert lines["Padé[1/1]"].meets == (None,) and "no certified boundary" in lines["Padé[1/1]"].text
        msg = plain(p.message.value)
        assert "Certified bounds certify truncation orders" in msg and "reference=" not in msg
    finally:
        p.close()


# ---------------------------------------------------------------- readout
def test_readout_shows_error_brackets_that_contain_the_closed_form_error():
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), rtol=0.01, coupling_range=(0.0, 2.0), reference="bounds",
                    **OPTS)
    try:
        lam = float(p.result.couplings[12])  # a sweep point: brackets certified there
        p.set_coupling(lam)
        text = plain(p.readout.value)
        exact = -np.sqrt(0.25 + 0.25 * lam**2)  # closed form (Sakurai 1994, §5.1)
        err = abs(-0.25 * lam**2 - (exact + 0.5)) / abs(exact + 0.5)
        lo, hi = (float(x.replace("−", "-")) for x in re.search(r"\[([-−0-9.e]+), ([-−0-9.e]+)\] %", text).groups())
        assert lo <= 100 * err <= hi
        elo, ehi = (float(x.replace("−", "-")) for x in re.search(r"∈ \[([-−0-9.e]+), ([-−0-9.e]+)\]", text).groups())
        assert elo <= exact <= ehi
        assert "certified brackets" in text
    finally:
        p.close()


def test_formula_export_refuses_an_answer_without_exact_solves(tmp_path):
    p = LevelsPanel(two_level(), levels=[0], orders=(2,), coupling_range=(0.0, 1.0), reference="bounds", **OPTS)
    try:
        with pytest.raises(ValueError, match="uses certified bounds with no exact solve"):
            p.export_formula(tmp_path)
        paths = p.export(tmp_path, "png")  # the figure and numbers export as usual
        assert all(x.exists() for x in paths)
        assert '"reference": "bounds"' in paths[2].read_text()
    finally:
        p.close()
