"""Exported formulas: coefficients, rationals, text forms and ranges against outside references.

References: published series coefficients, sympy (exact rational arithmetic), matplotlib's
mathtext parser, numpy's dense eigensolver (brute-force boundaries on fine grids), and
validity_boundary itself for "the ranges are the same numbers".
"""

import json
import math
from decimal import ROUND_DOWN, Decimal
from fractions import Fraction

import matplotlib.pyplot as plt
import numpy as np
import pytest
import sympy
from hypothesis import given, settings, strategies as st
from matplotlib.figure import Figure
from matplotlib.mathtext import MathTextParser
from numpy.testing import assert_allclose
from scipy.optimize import brentq

import ptcheck
from ptcheck import Formula, Model, dispersive_shift, formula, validity_boundary
from ptcheck.blocks import block_series
from ptcheck.formula import _check_variable, simple_rational
from ptcheck.models import anharmonic_oscillator, jaynes_cummings
from ptcheck.plots import plot_formula

from conftest import random_hermitian

LAMS = (-0.03, -0.007, 0.004, 0.02, 0.045)


def sig3_down(x):
    """|x| to three significant digits, rounded toward zero (the test's own rounding)."""
    d = Decimal(repr(abs(x)))
    step = Decimal(1).scaleb(d.adjusted() - 2)
    return f"{float(d.quantize(step, rounding=ROUND_DOWN)):.3g}"


def run_python(source, name):
    ns = {}
    exec(compile(source, "<formula>", "exec"), ns)  # noqa: S102 - the source under test
    return ns[name]


@pytest.fixture(scope="module")
def quartic():
    # H = a†a + 1/2 + λ x⁴ with x = (a + a†)/√2; 40 states keep orders <= 4 of level 0 exact
    return anharmonic_oscillator(kind="quartic", n_basis=40)


@pytest.fixture(scope="module")
def quartic_formula(quartic):
    return formula(quartic, 0, 4, directions=(1,), max_coupling=1.0, params={"kind": "quartic", "n_basis": 40})


@pytest.fixture(scope="module")
def three_level():
    # invented: a degenerate pair at 0 coupled to a level at 5; no symmetry keeps its H_eff diagonal
    return Model(np.diag([0.0, 0.0, 5.0]), [[0, 1, 1], [1, 0, 0], [1, 0, 0]], name="invented three-level")


@pytest.fixture(scope="module")
def group_formula(three_level):
    # default treatment: degenerate perturbation theory of the pair, exported as its effective Hamiltonian
    return formula(three_level, 0, 3)


@pytest.fixture(scope="module")
def hubbard():
    # t = 1, U = 8 (the builder's defaults), S_z = 0 sector
    return ptcheck.models.hubbard_dimer()


@pytest.fixture(scope="module")
def near_degenerate():
    # invented: levels 1 and 2 are 0.05 apart and strongly coupled
    return Model(np.diag([0.0, 1.0, 1.05]), [[0, 0.1, 0], [0.1, 0, 0.1], [0, 0.1, 0]], name="invented near-degenerate")


@pytest.fixture(scope="module")
def chi_formula():
    return formula(jaynes_cummings(n_photons=4), dispersive_shift(), 4)


# ---------------------------------------------------------------- rationals
def test_quartic_ground_state_fractions(quartic_formula):
    # E_0(λ) = 1/2 + 3/4 λ − 21/8 λ² + 333/16 λ³ − 30885/128 λ⁴ + … (Bender & Wu, Phys. Rev. 184, 1231
    # (1969), for H = p² + x²/4 + λx⁴/4, which is p²/2 + x²/2 + λx⁴ after x → √2 x: the same series)
    expected = (Fraction(1, 2), Fraction(3, 4), Fraction(-21, 8), Fraction(333, 16), Fraction(-30885, 128))
    assert quartic_formula.rationals == expected
    assert quartic_formula.expression == "1/2 + 3/4*lam - 21/8*lam**2 + 333/16*lam**3 - 30885/128*lam**4"
    assert r"\frac{21}{8}\lambda^{2}" in quartic_formula.latex
    assert_allclose(quartic_formula.coefficients, [float(f) for f in expected], rtol=1e-13)


def test_cubic_oscillator_odd_orders_are_exact_zeros():
    # V = x³ is odd under parity, so every odd order of a parity eigenstate vanishes (common practice,
    # no source); E_2 = −⟨0|x³|1⟩²/1 − ⟨0|x³|3⟩²/3 = −9/8 − 1/4 = −11/8 (hand calculation, x = (a + a†)/√2)
    # (max_coupling 0.04: at λ ≈ 0.075 a state of the truncated basis dives through the ground state)
    f = formula(anharmonic_oscillator(kind="cubic", n_basis=30), 0, 4, directions=(1,), max_coupling=0.04)
    assert f.rationals[1] == 0 and f.rationals[3] == 0
    assert f.rationals[2] == Fraction(-11, 8)
    assert "lam**3" not in f.expression and "lam**1" not in f.expression


def test_simple_rational_accepts_exact_fractions_and_refuses_the_rest():
    # common practice, no source: exact rationals come back, irrational numbers and near misses do not
    for p, q in [(1, 3), (-21, 8), (333, 16), (1, 1000), (7, 1), (-30885, 128)]:
        assert simple_rational(p / q) == Fraction(p, q)
    for x in [math.pi, math.sqrt(2), math.e, 0.75 * (1 + 1e-10), -2.625 * (1 - 3e-11), 1 / 12345678, 123456789.5]:
        assert simple_rational(x) is None, x


@settings(max_examples=200, deadline=None)
@given(st.integers(-3000, 3000), st.integers(1, 3000), st.floats(1e-10, 1e-6))
def test_a_nudged_fraction_is_never_shown_as_one(p, q, nudge):
    # common practice, no source: a number 1e-10..1e-6 (relative) away from p/q must not be shown as p/q
    x = p / q * (1 + nudge) if p else nudge
    f = simple_rational(x)
    assert f is None or abs(float(f) - x) <= 1e-12 * abs(x)
    assert f != Fraction(p, q)


def test_random_model_coefficients_are_not_shown_as_fractions(rng):
    # a random Hermitian model has no rational coefficients: none may be claimed (common practice, no source)
    h0 = np.diag(np.sort(rng.normal(size=8)) * 3.0)
    m = Model(h0, random_hermitian(rng, 8), name="random")
    f = formula(m, 0, 5, tol=1e-3)
    assert all(x is None for x in f.rationals), f.rationals
    assert "/" not in f.expression


# ---------------------------------------------------------------- text forms evaluate to the series
def test_expression_and_python_function_equal_the_series(quartic, quartic_formula):
    # references: sympy's exact evaluation of the text; the series' own energy() (common practice, no source)
    s = quartic.series(0, 4)
    expr = sympy.sympify(quartic_formula.expression)
    assert expr.free_symbols == {sympy.Symbol("lam")}
    fn = run_python(quartic_formula.python, quartic_formula.function_name)
    for lam in LAMS:
        ref = float(s.energy(lam, 4))
        assert float(expr.subs("lam", sympy.Rational(lam))) == pytest.approx(ref, rel=1e-12)
        assert fn(lam) == pytest.approx(ref, rel=1e-12)
        assert eval(quartic_formula.expression, {"lam": lam}) == pytest.approx(ref, rel=1e-12)  # noqa: S307


def test_python_source_needs_nothing_from_ptcheck(quartic_formula):
    # the function runs in an empty namespace and its docstring carries the model, tolerance and range
    assert "ptcheck" not in quartic_formula.python.split('"""')[-1]
    fn = run_python(quartic_formula.python, "energy")
    doc = fn.__doc__
    assert "quartic oscillator" in doc and "n_basis=40" in doc
    for r in quartic_formula.ranges:
        assert f"{100 * r.rtol:.3g} %" in doc
        assert sig3_down(r.upper) in doc


def test_quantity_expression_equals_its_series(chi_formula):
    # χ = g²/Δ at order 2 (Blais et al., Phys. Rev. A 69, 062320 (2004), dispersive limit; sign convention
    # of ptcheck.quantities); here g = 0.1, Δ = ω_q − ω_r = 5 − 6 = −1
    m = jaynes_cummings(n_photons=4)
    qs = ptcheck.quantity_series(m, dispersive_shift(), 4, treatment="nondegenerate")
    assert chi_formula.rationals[:3] == (0, 0, Fraction(-1, 100))
    fn = run_python(chi_formula.python, "chi")
    expr = sympy.sympify(chi_formula.expression)
    for lam in (-0.8, 0.3, 1.1):
        ref = float(qs.energy(lam, 4))
        assert fn(lam) == pytest.approx(ref, rel=1e-12)
        assert float(expr.subs("lam", lam)) == pytest.approx(ref, rel=1e-12)


def test_degenerate_group_exports_its_effective_hamiltonian(three_level, group_formula):
    # the default treatment of an exactly degenerate level is degenerate perturbation theory; the pair's
    # H_eff is not diagonal in its good states at order 2, so no scalar series is its eigenvalue.
    # second order: H_ab = Σ_m V_am V_mb / (E0 − E_m) over the outside level at 5 (Löwdin partitioning;
    # e.g. Winkler, Spin–Orbit Coupling Effects in 2D Electron and Hole Systems (2003), App. B; from memory)
    # in the good-state basis (|0⟩ ∓ |1⟩)/√2 with V_{a2} = ±1/√2: entries ±(1/2)/(−5) = ±1/10
    assert group_formula.kind == "effective_hamiltonian"
    assert group_formula.treatment == "degenerate" and group_formula.levels == (0, 1)
    assert "effective Hamiltonian of the degenerate group" in group_formula.latex
    assert any("e0" in n and "0.7071" in n for n in group_formula.notes)  # the rotated work basis, spelled out
    assert group_formula.rationals[1] == ((-1, 0), (0, 1))
    assert {abs(x) for row in group_formula.rationals[2] for x in row} == {Fraction(1, 10)}
    bs = block_series(three_level, [0, 1], 3)
    fn = run_python(group_formula.python, "effective_hamiltonian")
    expr = sympy.sympify(group_formula.expression)
    for lam in (-0.7, 0.2, 1.3):
        ref = bs.effective_hamiltonian(lam, 3)
        assert_allclose(np.array(fn(lam)), ref, rtol=1e-12, atol=1e-15)
        assert_allclose(np.array(sympy.Matrix(expr).subs("lam", lam), dtype=float), ref, rtol=1e-12, atol=1e-15)
    # the exact level 0 (lowest eigenvalue for λ > 0, numpy eigvalsh) is an eigenvalue of H_eff to O(λ⁴)
    lam = 0.05
    exact = np.linalg.eigvalsh(three_level.hamiltonian(lam))[0]
    assert np.linalg.eigvalsh(np.array(fn(lam)))[0] == pytest.approx(exact, abs=10 * lam**4)


def test_degenerate_branch_with_diagonal_heff_is_a_series(hubbard):
    # Hubbard dimer (t = 1, U = 8): the singly occupied pair is exactly degenerate and splits at order 2;
    # spin symmetry keeps its H_eff diagonal in the singlet/triplet good states, so the singlet branch is
    # a scalar series. Exact singlet energy (U − √(U² + 16 t²λ²))/2 (two-site Hubbard model, from memory),
    # expanded by sympy: −λ²/2 + λ⁴/32 − …
    lam = sympy.Symbol("lam")
    exact = (8 - sympy.sqrt(64 + 16 * lam**2)) / 2
    taylor = sympy.Poly(sympy.series(exact, lam, 0, 5).removeO(), lam).all_coeffs()[::-1]
    f = formula(hubbard, 0, 4)
    assert f.treatment == "degenerate" and f.kind == "series"
    assert f.rationals == tuple(Fraction(int(c.p), int(c.q)) for c in taylor)
    assert f.expression == "-1/2*lam**2 + 1/32*lam**4"
    assert any("0.7071 |↑,↓⟩ − 0.7071 |↓,↑⟩" in n for n in f.notes)  # the singlet good state
    # the text is exactly the expansion the boundaries judge: the branch eigenvalue of the group's H_eff
    (e,) = ptcheck.treatment.expansions(hubbard, [0], 4)
    fn = run_python(f.python, "energy")
    for x in (-1.3, -0.4, 0.25, 0.9, 2.0):
        assert fn(x) == pytest.approx(float(e.energy(x)), rel=1e-12, abs=1e-15)
    for r, rtol in zip(f.ranges, (0.01, 0.05)):
        hi = validity_boundary(hubbard, 0, 4, rtol=rtol, direction=+1)
        lo = validity_boundary(hubbard, 0, 4, rtol=rtol, direction=-1)
        assert (r.lower, r.upper) == (lo.coupling, hi.coupling) and hi.treatment == "degenerate"


def test_superexchange_formula_against_brute_force(hubbard):
    # J = E_1 − E_0 (exchange(1, 0)): 4t²/U at second order (Anderson, Phys. Rev. 115, 2 (1959)), here
    # λ²/2 − λ⁴/32 from the exact singlet energy (U − √(U² + 16λ²))/2 and the triplet at 0
    f = formula(hubbard, ptcheck.exchange(1, 0), 4, rtol=0.01, directions=(1,))
    assert f.rationals == (0, 0, Fraction(1, 2), 0, Fraction(-1, 32))
    fn = run_python(f.python, "J")

    # brute force: numpy eigvalsh of the 4x4 matrix on a fine grid, brentq on the first crossing of 1 %
    def excess(lam):
        e = np.linalg.eigvalsh(hubbard.hamiltonian(lam))
        j = e[1] - e[0]
        return abs(fn(lam) - j) / abs(j) - 0.01

    grid = np.linspace(1e-3, 3.0, 600)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    assert i > 0 and np.all(vals[:i] <= 0)
    lam_bf = brentq(excess, grid[i - 1], grid[i], xtol=1e-10)
    assert f.ranges[0].upper == pytest.approx(lam_bf, rel=2e-3)


def test_whole_sector_group_is_exact_not_a_range():
    # invented: a degenerate pair that V couples only to each other; E = ±λ exactly (eigenvalues of
    # [[0, λ], [λ, 0]]), so the degenerate treatment is exact diagonalisation and no tolerance is judged
    m = Model(np.diag([0.0, 0.0, 3.0]), [[0, 1, 0], [1, 0, 0], [0, 0, 0.5]], name="invented sector pair")
    f = formula(m, 0, 2)
    assert f.treatment == "degenerate" and f.exact_in_sector and f.expression == "-lam"
    assert all(b.status == "exact_in_sector" for r in f.ranges for b in r.boundaries)
    assert f.ranges[0].text.startswith("exact within its sector")
    assert f.latex.count("exact within its sector") == 1
    MathTextParser("agg").parse(f.latex, dpi=72)


def test_latex_parses_with_mathtext(quartic_formula, group_formula, chi_formula):
    # reference: matplotlib's mathtext parser (the renderer of the slide figure)
    parser = MathTextParser("agg")
    for f in (quartic_formula, group_formula, chi_formula):
        for line in f.latex.split("\n"):
            parser.parse(line, dpi=72)
        for eq in f.equations:
            assert "\n" not in eq and eq.startswith("$") and eq.endswith("$")
    assert "\n" not in quartic_formula.latex  # a series is one line: equation, then its ranges


# ---------------------------------------------------------------- ranges
def test_ranges_are_the_validity_boundaries(chi_formula):
    # the same numbers as validity_boundary called for the exported expansion
    m = jaynes_cummings(n_photons=4)
    texts = []
    assert chi_formula.treatment == "nondegenerate"
    for r, rtol in zip(chi_formula.ranges, (0.01, 0.05)):
        assert r.rtol == rtol and r.tol is None
        lo = validity_boundary(m, dispersive_shift(), 4, rtol=rtol, direction=-1)
        hi = validity_boundary(m, dispersive_shift(), 4, rtol=rtol, direction=+1)
        assert (r.lower, r.upper) == (lo.coupling, hi.coupling)
        texts.append((sig3_down(lo.coupling), sig3_down(hi.coupling)))
    # symmetric to three digits here (χ is even in λ): written |λ| < x, as in the brief's wording
    assert texts[0][0] == texts[0][1]
    # the builder names the physical coupling (λ = 1 is g = 0.1): its range follows in parentheses
    g = m.coupling_scale
    phys = [sig3_down(abs(r.upper) * g) for r in chi_formula.ranges]
    assert (
        f"valid to $1\\,\\%$ for $|\\lambda| < {texts[0][1]}$ (${phys[0]}$), "
        f"to $5\\,\\%$ for $|\\lambda| < {texts[1][1]}$ (${phys[1]}$)"
    ) in chi_formula.latex


def test_asymmetric_range_names_both_ends(group_formula, three_level):
    r = group_formula.ranges[0]
    lo = validity_boundary(three_level, 0, 3, rtol=0.01, direction=-1)
    hi = validity_boundary(three_level, 0, 3, rtol=0.01, direction=+1)
    assert (r.lower, r.upper) == (lo.coupling, hi.coupling)
    assert sig3_down(lo.coupling) != sig3_down(hi.coupling)
    assert r.text == f"valid to 1 % for −{sig3_down(lo.coupling)} < λ < {sig3_down(hi.coupling)}"


def test_printed_range_against_brute_force(quartic, quartic_formula):
    # brute force: the exported function against numpy eigvalsh (lowest level of the dense matrix)
    # on a fine grid, then brentq on the first crossing of the tolerance
    fn = run_python(quartic_formula.python, "energy")
    for r in quartic_formula.ranges:

        def excess(lam):
            e = np.linalg.eigvalsh(quartic.hamiltonian(lam))[0]
            return abs(fn(lam) - e) / abs(e - 0.5) - r.rtol

        grid = np.linspace(1e-4, 0.1, 600)
        vals = np.array([excess(x) for x in grid])
        i = int(np.argmax(vals > 0))
        assert i > 0 and np.all(vals[:i] <= 0)
        lam_bf = brentq(excess, grid[i - 1], grid[i], xtol=1e-10)
        printed = sig3_down(r.upper)
        assert r.text.endswith(f"for 0 ≤ λ < {printed}")
        # printed: three digits rounded toward 0, of a boundary known to xrtol = 1e-3
        assert lam_bf * (1 - 1.2e-2) <= float(printed) <= lam_bf * (1 + 2e-3)


def test_block_range_against_brute_force(three_level, group_formula):
    # brute force for λ > 0: level 0 is the lowest exact eigenvalue and the lowest eigenvalue of the
    # exported 2x2 matrix (no crossing for λ > 0); numpy eigvalsh, fine grid + brentq
    fn = run_python(group_formula.python, "effective_hamiltonian")
    r = group_formula.ranges[0]

    def excess(lam):
        e = np.linalg.eigvalsh(three_level.hamiltonian(lam))[0]
        return abs(np.linalg.eigvalsh(np.array(fn(lam)))[0] - e) / abs(e) - r.rtol

    grid = np.linspace(1e-3, 4.0, 800)
    vals = np.array([excess(x) for x in grid])
    i = int(np.argmax(vals > 0))
    lam_bf = brentq(excess, grid[i - 1], grid[i], xtol=1e-10)
    assert r.upper == pytest.approx(lam_bf, rel=2e-3)


def test_physical_coupling_shown_in_both_units():
    # invented: λ = 1 is 66 MHz
    m = jaynes_cummings(n_photons=4)
    m.coupling_scale, m.coupling_unit = 66.0, "MHz"
    f = formula(m, dispersive_shift(), 2, rtol=0.01)
    r = f.ranges[0]
    assert f"({sig3_down(r.upper * 66.0)} MHz)" in r.text
    assert f"(${sig3_down(r.upper * 66.0)}$ MHz)" in f.latex
    assert "66 MHz" in f.python
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    art = plot_formula(f, ax=fig.add_subplot())
    assert art.physical_axis is not None


def test_near_degenerate_boundary_names_the_block_alternative(near_degenerate):
    # the series of level 1 fails by mixing with level 2: the default still exports the series asked for,
    # and the boundary's suggestion (the block) is among the notes
    f = formula(near_degenerate, 1, 2, rtol=0.01, directions=(1,))
    assert f.treatment == "nondegenerate" and f.kind == "series"
    assert any("treatment='block'" in n for n in f.notes)


def test_near_degenerate_block_only_on_request(near_degenerate):
    # treatment='block' at a coupling of interest: the effective Hamiltonian of the block (1, 2), the same
    # matrices as blocks.block_series and the same ranges as validity_boundary with that treatment
    f = formula(near_degenerate, 1, 2, rtol=0.01, directions=(1,), treatment="block", coupling=0.3)
    assert f.treatment == "near-degenerate block" and f.kind == "effective_hamiltonian"
    assert f.levels == (1, 2) and "near-degenerate block" in f.latex
    assert_allclose(f.coefficients, block_series(near_degenerate, [1, 2], 2).coefficients, rtol=1e-13, atol=1e-15)
    b = validity_boundary(near_degenerate, 1, 2, rtol=0.01, treatment="block", coupling=0.3)
    assert f.ranges[0].upper == b.coupling and b.treatment == "near-degenerate block"
    # H_eff^(2) of the block: Löwdin partitioning, Σ_m V_am V_mb / (E_a − E_m) over the outside level 0
    # (Winkler (2003), App. B; from memory): V_10² / (1 − 0) = 0.01 on the (1, 1) entry, the rest zero
    assert_allclose(np.real(f.coefficients[2]), [[0.01, 0.0], [0.0, 0.0]], atol=1e-15)
    assert f.rationals[2][0][0] == Fraction(1, 100)
    with pytest.raises(ValueError, match="give coupling="):
        formula(near_degenerate, 1, 2, treatment="block")


def test_flipping_v_mirrors_the_formula(rng):
    # invariance (common practice, no source): V → −V is λ → −λ, so E^(k) → (−1)^k E^(k) and the
    # range is mirrored; an invented random model with an absolute tolerance
    h0 = np.diag([0.0, 1.0, 2.5, 4.0])
    v = random_hermitian(rng, 4)
    f = formula(Model(h0, v), 0, 3, tol=1e-3)
    g = formula(Model(h0, -v), 0, 3, tol=1e-3)
    assert_allclose(g.coefficients, f.coefficients * (-1.0) ** np.arange(4), rtol=1e-12, atol=1e-15)
    assert g.ranges[0].lower == pytest.approx(-f.ranges[0].upper, rel=2e-3)
    assert g.ranges[0].upper == pytest.approx(-f.ranges[0].lower, rel=2e-3)


# ---------------------------------------------------------------- result object
def test_to_dict_is_json_with_model_params_and_version(quartic_formula):
    d = json.loads(json.dumps(quartic_formula.to_dict()))
    assert d["model"] == "quartic oscillator (λ x⁴)"
    assert d["params"] == {"kind": "quartic", "n_basis": 40}
    assert d["ptcheck_version"] == ptcheck.__version__
    assert d["rationals"][2] == "-21/8"
    assert d["ranges"][0]["boundaries"][0]["status"] == "found"
    assert isinstance(quartic_formula, Formula)
    assert not quartic_formula.coefficients.flags.writeable
    assert "Formula(|0⟩, order 4" in repr(quartic_formula) and "<pre>" in quartic_formula._repr_html_()


def test_variable_names_read_as_symbols_by_sympy():
    # reference: sympy.sympify; every accepted coupling name must come back as a plain Symbol
    names = ("lam g eps x t J U alpha delta epsilon eta theta kappa mu nu xi rho sigma tau phi chi psi omega "
             "E I N O Q S beta gamma zeta pi Lambda lambda").split()
    for name in names:
        try:
            _check_variable(name)
        except ValueError:
            assert not isinstance(sympy.sympify(name) if name != "lambda" else None, sympy.Symbol)
        else:
            assert isinstance(sympy.sympify(name), sympy.Symbol), name


def test_variable_name_follows_the_model(quartic):
    f = formula(quartic, 0, 2, rtol=0.05, directions=(1,), max_coupling=1.0, variable="g")
    assert f.expression == "1/2 + 3/4*g - 21/8*g**2"
    assert "(g) = " in f.latex and run_python(f.python, "energy")(0.01) == pytest.approx(0.5 + 0.0075 - 21 / 8e4, rel=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "exc", "match"),
    [
        ({"rtol": -0.1}, ValueError, "rtol must be a positive"),
        ({"tol": "x"}, TypeError, "tol must be a positive number; got 'x'"),
        ({"rtol": []}, ValueError, "rtol is empty"),
        ({"order": "pade2/2"}, ValueError, "Padé"),
        ({"order": -1}, ValueError, "order must be an int >= 0; got -1"),
        ({"variable": "lambda"}, ValueError, "'lambda' is reserved"),
        ({"variable": "λ"}, ValueError, "ASCII Python identifier"),
        ({"directions": (2,)}, ValueError, "directions must hold"),
        ({"level": [0, 1]}, TypeError, "one level or quantity"),
        ({"treatment": "fast"}, ValueError, "treatment must be one of"),
    ],
)
def test_bad_input_is_refused_with_the_value(quartic, kwargs, exc, match):
    kw = dict(kwargs)
    level = kw.pop("level", 0)
    order = kw.pop("order", 2)
    with pytest.raises(exc, match=match):
        formula(quartic, level, order, **kw)


def test_quantity_with_an_effective_hamiltonian_level_is_refused(three_level, near_degenerate):
    # a level whose energy is an eigenvalue of a non-diagonal H_eff has no scalar series: no polynomial quantity
    with pytest.raises(ValueError, match="no single polynomial formula"):
        formula(three_level, ptcheck.exchange(1, 0), 2)
    with pytest.raises(ValueError, match=r"near-degenerate block\)"):
        formula(near_degenerate, ptcheck.exchange(2, 1), 2, treatment="block", coupling=0.3)


# ---------------------------------------------------------------- slide figure
def test_figure_holds_the_result(quartic_formula):
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    ax = fig.add_subplot()
    art = plot_formula(quartic_formula, ax=ax)
    assert art.equation.get_text() == quartic_formula.equations[0]
    x, y = art.curve.get_data()
    assert_allclose(x, quartic_formula.couplings)
    ref = np.where(quartic_formula.rel_error > 0, quartic_formula.rel_error, np.nan)
    assert_allclose(y, ref, equal_nan=True)
    assert sorted(line.get_ydata()[0] for line in art.tolerance_lines) == [0.01, 0.05]
    for shade, r in zip(art.shades, quartic_formula.ranges):
        assert (shade.get_x(), shade.get_x() + shade.get_width()) == pytest.approx((0.0, r.upper))
        assert shade.get_label() == r.text
    fig.canvas.draw()
    box = art.equation.get_window_extent()
    assert box.x1 <= fig.bbox.width  # one unbroken line that fits the figure


def test_long_formula_shrinks_instead_of_wrapping(quartic):
    f = formula(quartic, 0, 8, rtol=0.05, directions=(1,), max_coupling=1.0)
    art = plot_formula(f)
    art.figure.canvas.draw()
    assert "\n" not in art.equation.get_text()
    assert art.equation.get_window_extent().x1 <= art.figure.bbox.width
    plt.close(art.figure)


def test_block_figure_writes_one_line_per_entry(group_formula):
    fig = Figure(figsize=(9.6, 5.4), layout="constrained")
    art = plot_formula(group_formula, ax=fig.add_subplot())
    assert art.equation.get_text().split("\n") == list(group_formula.equations)
    assert len(group_formula.equations) == 3  # H11, H12, H22 of a Hermitian 2x2 matrix
