"""Formulas of two couplings: the exported text against closed forms (sympy) and the engine's own numbers."""

import numpy as np
import pytest
import sympy as sy
from matplotlib.mathtext import MathTextParser

from ptcheck import Model, formula, transition_frequency
from ptcheck.multiformula import multi_formula
from ptcheck.multiseries import multi_series

from conftest import oscillator_power, oscillator_x


@pytest.fixture(scope="module")
def oscillator_formula():
    n = 40
    m = Model(np.diag(np.arange(n) + 0.5), [oscillator_x(n)[:n, :n], oscillator_power(2, n)], names=("g", "k"))
    return m, multi_formula(m, 0, 4, rtol=0.01, directions=8, max_directions=8, max_coupling=100.0)


def test_expression_is_the_closed_form_expansion(oscillator_formula):
    # E = ½ sqrt(1 + 2k) − g²/(2(1 + 2k)) (completing the square, rescaled frequency; standard result):
    # its Taylor polynomial to total degree 4 has rational coefficients, so the exported text must equal it exactly
    _, f = oscillator_formula
    g, k, t = sy.symbols("g k t")
    closed = sy.sqrt(1 + 2 * k) / 2 - g**2 / (2 * (1 + 2 * k))
    ref = sy.expand(sy.series(closed.subs({g: t * g, k: t * k}), t, 0, 5).removeO().subs(t, 1))
    got = sy.sympify(f.expression, locals={"g": g, "k": k})
    assert sy.expand(got - ref) == 0
    assert f.variables == ("g", "k")
    assert f.rationals[2][0] == sy.Rational(-1, 2) and f.rationals[0][2] == sy.Rational(-1, 4)


def test_python_function_and_latex(oscillator_formula):
    m, f = oscillator_formula
    ns: dict = {}
    exec(f.python, ns)  # noqa: S102 - the exported source is the product under test
    fn = ns[f.function_name]
    s = multi_series(m, 0, 4)
    assert fn(0.03, -0.02) == pytest.approx(float(s.energy((0.03, -0.02))), rel=1e-14)
    assert "valid to 1 %" in fn.__doc__
    MathTextParser("agg").parse(f.equation, dpi=72)  # reference: matplotlib's mathtext parser
    for line in f.latex.splitlines():
        MathTextParser("agg").parse(line, dpi=72)
    assert f.to_dict()["coefficients"][0][0] == 0.5
    # the region sentence: the axis ranges are the boundaries of the axis rays
    r = f.regions[0]
    i = int(np.flatnonzero(np.isclose(r.angles, 0.5 * np.pi))[0])  # the k axis: the ground level shifts at every order
    assert r.boundaries[i].status == "found"
    assert f"< k < {r.boundary[i] * np.hypot(*r.directions[i]):.3g} on its axis" in f.ranges[0]


def test_reserved_coupling_names_fall_back_and_quantities():
    m = Model(np.diag([-0.5, 0.5, 1.7]), [np.array([[0, 1, 0.2], [1, 0, 0.3], [0.2, 0.3, 0]]), np.diag([1.0, -1.0, 0.5])],
              names=("E", "B"))
    f = multi_formula(m, transition_frequency(1, 0, name="f10"), 2, tol=1e-3, directions=4, max_directions=4)
    assert f.variables == ("lam1", "B")  # E is a sympy constant
    s = multi_series(m, transition_frequency(1, 0, name="f10"), 2)
    val = sy.sympify(f.expression).subs({sy.Symbol("lam1"): 0.01, sy.Symbol("B"): 0.02})
    assert float(val) == pytest.approx(float(s.energy((0.01, 0.02))), rel=1e-12)


def test_refusals():
    m = Model(np.diag([0.0, 1.0, 1.0]), [np.diag([0, 0.1, -0.1]), np.ones((3, 3)) * 0.1])
    with pytest.raises(ValueError, match="effective_hamiltonians"):
        multi_formula(m, 1, 2)
    with pytest.raises(ValueError, match="multi_formula"):
        formula(m, 0, 2)
    with pytest.raises(ValueError, match="variables must be two names"):
        multi_formula(m, 0, 2, variables=("a",))
