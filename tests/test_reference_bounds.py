"""Certified bounds as the reference of validity_boundary, compare, the report and the command line.

Referees: dense numpy eigvalsh per symmetry sector (fine grid + brentq for boundaries), scipy eigsh for
the sparse chain.  Models are invented.
"""

import json
import math

import numpy as np
import pytest
from scipy.optimize import brentq
from scipy.sparse.linalg import eigsh

from ptcheck import Model, compare, transition_frequency, validity_boundary
from ptcheck.cli import main
from ptcheck.models import spin_chain
from ptcheck.report import boundaries_csv, choose_reference, run_check, to_markdown


# ---------------------------------------------------------------------- brute-force referees
def sector_energy(model: Model, level: int, coupling: float) -> float:
    """Exact energy of a level: dense eigvalsh of its sector's block of H0 + λV, same rank inside the sector.

    A sector has no true crossings between its non-degenerate levels (V connects them), so the level continuous
    from the unperturbed one keeps its rank (common practice, no source)."""
    sector = np.flatnonzero(model.level_sectors == model.level_sectors[level])
    v = model.v.toarray() if hasattr(model.v, "toarray") else np.asarray(model.v)
    h = np.diag(model.e0[sector]) + coupling * v[np.ix_(sector, sector)]
    return float(np.linalg.eigvalsh(h)[int(np.searchsorted(sector, level))])


def brute_boundary(g, s_max: float, n_grid: int = 1500) -> float:
    """First s in (0, s_max] with g(s) > 0: fine grid, then brentq (common practice, no source)."""
    grid = np.linspace(0.0, s_max, n_grid)[1:]
    vals = np.array([g(s) for s in grid])
    bad = np.flatnonzero(vals > 0)
    if bad.size == 0:
        return math.inf
    i = int(bad[0])
    lo = grid[i - 1] if i > 0 else 1e-9 * s_max
    return float(brentq(g, lo, grid[i], xtol=1e-13, rtol=1e-13))


def two_sector_model(seed: int, scale: float = 0.4) -> Model:
    """Invented 6-level model whose V never couples even and odd levels (two symmetry sectors)."""
    rng = np.random.default_rng(seed)
    e0 = np.sort(rng.uniform(0.0, 4.0, 6)) + np.arange(6) * 0.3
    v = np.zeros((6, 6))
    for sector in ((0, 2, 4), (1, 3, 5)):
        a = rng.normal(size=(3, 3)) * scale
        v[np.ix_(sector, sector)] = (a + a.T) / 2
    return Model(np.diag(e0), v)


# ---------------------------------------------------------------------- validity_boundary(reference="bounds")
@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("order", [2, 3])
def test_certified_boundary_brackets_the_brute_force_boundary(seed, order):
    m = two_sector_model(seed)
    level = seed % 2  # the lowest level of either sector
    assert len(m.sectors) == 2
    b = validity_boundary(m, level, order, rtol=1e-2, reference="bounds", max_coupling=3.0)
    assert b.exact_solves == 0 and b.reference == "bounds"
    coeffs = m.series(level, order).energy_coefficients

    def g(s):
        e = sector_energy(m, level, s)
        return abs(np.polyval(coeffs[::-1], s) - e) - 1e-2 * abs(e - m.e0[level])

    true = brute_boundary(g, 3.0)
    assert abs(b.coupling) <= true * (1 + 1e-9)  # certified below: never above the true boundary
    if math.isfinite(b.certified_not):
        assert true <= abs(b.certified_not) * (1 + 1e-9)  # certified failure: never below it
    assert b.decision_at(0.5 * abs(b.coupling)) == "valid"
    if b.status == "certified" and math.isfinite(b.certified_not):
        mid = 0.5 * (abs(b.coupling) + abs(b.certified_not))
        assert b.decision_at(mid) == ("undecided" if mid < abs(b.certified_not) else "not valid")
        assert b.decision_at(1.01 * abs(b.certified_not)) == "not valid"


def test_certified_boundary_of_a_transition_between_sectors():
    m = two_sector_model(7)
    q = transition_frequency(1, 0)
    b = validity_boundary(m, q, 2, tol=1e-3, reference="bounds", max_coupling=3.0)
    assert b.exact_solves == 0 and b.status in ("certified", "not_reached")
    c0, c1 = (m.series(n, 2).energy_coefficients for n in (0, 1))

    def g(s):
        exact = sector_energy(m, 1, s) - sector_energy(m, 0, s)
        return abs(np.polyval((c1 - c0)[::-1], s) - exact) - 1e-3

    true = brute_boundary(g, 3.0)
    assert abs(b.coupling) <= true * (1 + 1e-9)
    if math.isfinite(b.certified_not):
        assert true <= abs(b.certified_not) * (1 + 1e-9)
    exact = validity_boundary(m, q, 2, tol=1e-3, xrtol=1e-9, max_coupling=3.0)
    assert abs(b.coupling) <= abs(exact.coupling) * (1 + 1e-8)


def test_chain_with_declared_parity_is_bracketed_in_its_sector():
    # Transverse-field Ising chain, h_z = 0: the H0 ground doublet is split by the declared parity into one
    # level per sector (Pfeuty, Ann. Phys. 57, 79 (1970) for the model); referee: dense eigvalsh per sector.
    m = spin_chain(n_spins=6)
    assert m.e0[0] == m.e0[1] and m.sector_of(0) != m.sector_of(1)
    b = validity_boundary(m, 0, 2, rtol=1e-2, reference="bounds", coupling=0.3)
    assert b.exact_solves == 0 and b.status == "certified" and b.rigorous
    coeffs = m.series(0, 2).energy_coefficients

    def g(s):
        e = sector_energy(m, 0, s)
        return abs(np.polyval(coeffs[::-1], s) - e) - 1e-2 * abs(e - m.e0[0])

    true = brute_boundary(g, 1.0, n_grid=400)
    assert abs(b.coupling) <= true <= abs(b.certified_not)
    assert abs(b.coupling) >= 0.9 * true  # tight on this small chain (own measurement: 0.999)


def test_reference_bounds_refusals_and_fields():
    m = two_sector_model(1)
    with pytest.raises(ValueError, match="reference must be one of"):
        validity_boundary(m, 0, 2, rtol=1e-2, reference="both")
    with pytest.raises(ValueError, match="give them with reference='bounds'"):
        validity_boundary(m, 0, 2, rtol=1e-2, gap="weyl")
    with pytest.raises(ValueError, match="certifies truncation orders"):
        validity_boundary(m, 0, "pade1/1", rtol=1e-2, reference="bounds")
    with pytest.raises(ValueError, match="gap must be one of"):
        validity_boundary(m, 0, 2, rtol=1e-2, reference="bounds", gap="exact")
    deg = Model(np.diag([0.0, 0.0, 1.0]), [[0, 0.3, 1], [0.3, 0, 1], [1, 1, 0]])
    with pytest.raises(ValueError, match="gets the degenerate treatment"):
        validity_boundary(deg, 0, 2, rtol=1e-2, reference="bounds")
    b = validity_boundary(m, 0, 2, rtol=1e-2, reference="bounds", gap="weyl")
    d = json.loads(json.dumps(b.to_dict()))
    assert d["reference"] == "bounds" and d["exact_solves"] == 0 and d["gap_kind"] == "weyl"
    assert b.rigorous and "certified" in repr(b)
    e = validity_boundary(m, 0, 2, rtol=1e-2)
    assert e.reference == "exact" and not e.rigorous and math.isnan(e.certified_not)
    assert e.decision_at(2 * abs(e.coupling)) == "not valid"


# ---------------------------------------------------------------------- compare(reference=...)
def test_compare_brackets_contain_the_exact_values_and_errors():
    m = two_sector_model(3)
    q = transition_frequency(1, 0)
    lam = np.linspace(-0.6, 0.6, 9)
    both = compare(m, [0, 1, q], [1, 2, 4], lam, reference="both")
    assert both.exact_solves > 0 and both.reference == "both"
    # referee: dense eigvalsh per sector
    e0 = np.array([sector_energy(m, 0, x) for x in lam])
    e1 = np.array([sector_energy(m, 1, x) for x in lam])
    for ti, ex in enumerate((e0, e1, e1 - e0)):
        np.testing.assert_allclose(both.exact[ti], ex, atol=1e-10)
        assert np.all(both.exact_lower[ti] <= ex + 1e-12) and np.all(ex <= both.exact_upper[ti] + 1e-12)
    finite = np.isfinite(both.abs_error)
    assert np.all(both.error_lower[finite] <= both.abs_error[finite] + 1e-12)
    assert np.all(both.abs_error[finite] <= both.error_upper[finite] + 1e-12)
    rel = np.isfinite(both.rel_error)
    assert np.all(both.rel_error_lower[rel] <= both.rel_error[rel] * (1 + 1e-9) + 1e-15)
    assert np.all(both.rel_error[rel] <= both.rel_error_upper[rel] * (1 + 1e-9) + 1e-15)
    lo, hi = both.error_bracket(q, 2)
    np.testing.assert_array_equal(lo, both.error_lower[2, 1])
    only = compare(m, [0, 1, q], [1, 2, 4], lam, reference="bounds")
    assert only.exact_solves == 0 and np.all(np.isnan(only.exact)) and np.all(np.isnan(only.abs_error))
    np.testing.assert_allclose(only.error_upper, both.error_upper, rtol=1e-12, atol=1e-15)
    rows = only.to_rows()
    assert {"error_lower", "error_upper", "bounds_gap_kind"} <= set(rows[0])
    with pytest.raises(ValueError, match="has no bounds"):
        compare(m, [0], [2], lam).error_bracket(0, 2)


def test_compare_marks_degenerate_brackets_conditional():
    deg = Model(np.diag([0.0, 0.0, 1.0, 2.0]), [[0, 0.3, 1, 0.2], [0.3, 0, 1, 0.1], [1, 1, 0, 0.5], [0.2, 0.1, 0.5, 0]])
    r = compare(deg, [0, 3], [2], [0.05, 0.1], reference="bounds")
    assert np.all(np.isfinite(r.error_upper)) and r.exact_solves == 0
    assert r.bounds_rigorous.tolist() == [[False, False], [True, True]]
    assert any("exactly degenerate" in n for n in r.notes)


# ---------------------------------------------------------------------- report
def test_run_check_with_bounds_agrees_with_brute_force():
    m = two_sector_model(5)
    lam0 = 0.25
    r = run_check(m, [0, 1], [2, 4], coupling=lam0, rtol=1e-2, reference="bounds")
    assert r.settings["reference"] == "bounds"
    assert all(b.exact_solves == 0 for b in r.boundaries) and r.comparison.exact_solves == 0
    for v in r.verdicts:
        n = 0 if v.target == m.label(0) else 1
        coeffs = m.series(n, v.order).energy_coefficients
        e = sector_energy(m, n, lam0)
        err = abs(np.polyval(coeffs[::-1], lam0) - e) / abs(e - m.e0[n])
        assert v.error_lower <= err * (1 + 1e-9) and err <= v.error_upper * (1 + 1e-9)
        if v.status == "valid":
            assert err <= 1e-2 and "certified valid" in v.text
        elif v.status == "not valid":
            assert "certified NOT valid" in v.text
    md = to_markdown(r)
    assert "## Certified validity boundaries" in md and "certified not \\|λ\\|" in md
    assert "No exact solve" in r.cautions[0]
    csv_text = boundaries_csv(r)
    assert "certified_not" in csv_text.splitlines()[0]
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["verdict"]["per_target"][0]["reference"] == "bounds"


def test_choose_reference_is_the_one_place():
    m = two_sector_model(2)
    assert choose_reference(m, [0], [2]) == ("exact", choose_reference(m, [0], [2])[1])
    assert choose_reference(m, [0], [2], bounds_above=3)[0] == "bounds"
    assert choose_reference(m, [0], ["pade1/1"], bounds_above=3)[0] == "exact"
    deg = Model(np.diag([0.0, 0.0, 1.0]), [[0, 0.3, 1], [0.3, 0, 1], [1, 1, 0]])
    ref, why = choose_reference(deg, [0], [2], bounds_above=1)
    assert ref == "exact" and "degenerate" in why
    with pytest.raises(ValueError, match="reference must be one of"):
        choose_reference(m, [0], [2], reference="both")


# ---------------------------------------------------------------------- command line
CHAIN_TOML = """title = "Invented chain with site fields"
[model]
builtin = "spin_chain"
[model.params]
n_spins = 14
h_z = [0.1, 0.13, 0.17, 0.22, 0.12, 0.19, 0.25, 0.11, 0.16, 0.21, 0.14, 0.23, 0.18, 0.15]
[check]
levels = [0]
orders = [2]
coupling = 0.3
rtol = 0.01
"""


@pytest.mark.parametrize("flags", [["--reference", "bounds"], ["--bounds-above", "10000"]])
def test_cli_certified_report_on_a_sparse_chain(tmp_path, capsys, flags):
    # N = 2^14: exact solves cost about a second each here, so a whole report needs bounds to stay quick.
    f = tmp_path / "chain.toml"
    f.write_text(CHAIN_TOML, encoding="utf-8")
    out = tmp_path / "out"
    status = main(["check", str(f), "--out", str(out), "--no-figures", *flags])
    printed = capsys.readouterr().out
    d = json.loads((out / "report.json").read_text(encoding="utf-8"))
    assert d["settings"]["reference"] == "bounds"
    assert d["boundaries"][0]["exact_solves"] == 0 and d["comparison"]["exact_solves"] == 0
    v = d["verdict"]["per_target"][0]
    # referee: scipy eigsh ground state of the chain at λ = 0.3
    from ptcheck.modelfile import load_model_file

    m = load_model_file(str(f)).model
    e = float(eigsh(m.hamiltonian(0.3), k=1, which="SA", tol=1e-12, return_eigenvectors=False)[0])
    coeffs = m.series(0, 2).energy_coefficients
    err = abs(np.polyval(coeffs[::-1], 0.3) - e) / abs(e - m.e0[0])
    assert v["error_lower"] <= err * (1 + 1e-7) and err <= v["error_upper"] * (1 + 1e-7)
    assert (status == 0) == (v["status"] == "valid") and v["status"] == "valid" and err <= 0.01
    assert "certified valid" in printed and "No exact solve" in printed
    md = (out / "report.md").read_text(encoding="utf-8")
    assert "## Certified validity boundaries" in md and "certified" in md


def test_cli_reference_flags_bad_input(tmp_path, capsys):
    f = tmp_path / "m.toml"
    f.write_text('[model]\nbuiltin = "two_level"\n', encoding="utf-8")
    base = ["check", str(f), "--out", str(tmp_path / "o"), "--no-figures", "--coupling", "0.1"]
    assert main([*base, "--gap", "sometimes"]) == 2
    assert "--gap must be one of" in capsys.readouterr().err
    assert main([*base, "--bounds-above", "-3"]) == 2
    assert "--bounds-above must be" in capsys.readouterr().err
    assert main([*base, "--reference", "oracle"]) == 2


# ---------------------------------------------------------------------- exactly degenerate groups
def degenerate_model(seed: int) -> Model:
    """Invented 7-level model, one sector, with a threefold degenerate H0 level (ranks 2, 3, 4)."""
    rng = np.random.default_rng(seed)
    e0 = np.array([-2.0, -1.1, 0.0, 0.0, 0.0, 1.3, 2.4]) + 0.1 * seed
    a = rng.normal(size=(7, 7)) * 0.3
    return Model(np.diag(e0), (a + a.T) / 2)


@pytest.mark.parametrize("seed", range(3))
def test_degenerate_group_brackets_contain_the_exact_levels(seed):
    m = degenerate_model(seed)
    grp = m.degenerate_group_of(2)
    assert grp == (2, 3, 4) and len(m.sectors) == 1
    lam = np.array([-0.12, -0.03, 0.01, 0.05, 0.12])
    r = compare(m, list(grp), [1, 2], lam, reference="both")
    assert not r.bounds_rigorous.any()  # pairing labels with ranks is not proven: never rigorous
    # rank by rank (rigorous part): the sorted brackets hold the sorted exact levels of the group's ranks
    # (numpy eigvalsh of the whole matrix: one sector)
    exact = np.array([np.linalg.eigvalsh(m.hamiltonian(x))[2:5] for x in lam]).T
    lo, hi = np.sort(r.exact_lower, axis=0), np.sort(r.exact_upper, axis=0)
    assert np.all(lo <= exact + 1e-12) and np.all(exact <= hi + 1e-12)
    # label by label: where compare's exact side pairs a level, its bracket holds that value
    paired = np.isfinite(r.exact)
    assert np.all(r.exact_lower[paired] <= r.exact[paired] + 1e-12)
    assert np.all(r.exact[paired] <= r.exact_upper[paired] + 1e-12)
    finite = np.isfinite(r.abs_error)
    assert np.all(r.error_lower[finite] <= r.abs_error[finite] + 1e-12)
    assert np.all(r.abs_error[finite] <= r.error_upper[finite] + 1e-12)


def test_degenerate_level_error_bounds_and_refused_boundary():
    # Ising chain, declared parity: the one-domain-wall manifold is degenerate inside each sector (Pfeuty,
    # Ann. Phys. 57, 79 (1970) for the model); referee: dense eigvalsh of the sector.
    from ptcheck import error_bounds

    m = spin_chain(n_spins=6)
    grp = m.degenerate_group_of(2)
    assert grp is not None and len(grp) > 2
    lam = np.array([0.03, 0.1])
    b = error_bounds(m, 2, 2, lam)
    assert not b.rigorous.any() and any("exactly degenerate" in n for n in b.notes)
    sector = np.flatnonzero(m.level_sectors == m.level_sectors[2])
    first = int(np.searchsorted(sector, grp[0]))
    v = m.v.toarray()
    for i, x in enumerate(lam):
        w = np.linalg.eigvalsh(np.diag(m.e0[sector]) + x * v[np.ix_(sector, sector)])
        assert b.energy_lower[i] <= w[first] + 1e-12 and w[first] <= b.energy_upper[i] + 1e-12  # lowest branch
    with pytest.raises(ValueError, match="degenerate treatment"):
        validity_boundary(m, 2, 2, rtol=1e-2, reference="bounds")


# ---------------------------------------------------------------------- band figure
def test_band_figure_draws_the_brackets_and_certified_couplings():
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from ptcheck.plots import plot_error_bands

    m = two_sector_model(4)
    lam = np.linspace(0.0, 1.5, 31)
    r = compare(m, [0], [2], lam, reference="bounds", gap="weyl")
    b = validity_boundary(m, 0, 2, tol=1e-3, reference="bounds", gap="weyl")
    ax = Figure().add_subplot()
    art = plot_error_bands(r, [b], error="absolute", ax=ax)
    lo, hi = art.edges[0]
    np.testing.assert_allclose(hi.get_ydata(), np.where(r.error_upper[0, 0] > 0, r.error_upper[0, 0], np.nan))
    assert art.certified_lines[0].get_xdata()[0] == b.coupling
    if math.isfinite(b.certified_not):
        assert art.fail_lines[0].get_xdata()[0] == b.certified_not
    open_ = ~np.isfinite(r.error_upper[0, 0])
    assert bool(art.open_spans) == bool(open_.any())
    with pytest.raises(ValueError, match="needs a comparison with bounds"):
        plot_error_bands(compare(m, [0], [2], lam), ax=Figure().add_subplot())
