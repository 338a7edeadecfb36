"""Reports show the symmetry sectors, the declared conserved operators and the physical coupling beside λ;
model files declare conserved operators.

Referees: the sector sizes of a linear rotor in its |J, M⟩ basis are counted here in closed form (M is
conserved; the M sector holds J = |M| … J_max, i.e. J_max − |M| + 1 states: common practice, no source); the
parity sectors of an Ising ring are built here from the parity matrix Π σx itself and diagonalised with numpy.
"""

from __future__ import annotations

import csv
import io
import json
import re

import numpy as np
import pytest
import scipy.sparse as sp

from ptcheck import Model, dispersive_shift, track
from ptcheck.cli import main
from ptcheck.modelfile import load_model_file
from ptcheck.models import jaynes_cummings, kerr_qubit_resonator, linear_rotor
from ptcheck.report import boundaries_csv, run_check, to_json, to_markdown

from conftest import ising_ring

J_MAX = 6


def test_report_lists_the_sectors_and_the_sector_of_each_judged_level():
    m = linear_rotor(j_max=J_MAX)
    r = run_check(m, [(1, 0), (2, 1)], [2], coupling=0.3, convergence_order=10, n_points=5)
    d = json.loads(to_json(r))["model"]
    # closed-form count: M = −J_max … J_max, the M sector holds J_max − |M| + 1 states
    want = {("M 0" if mm == 0 else f"M {mm:+d}"): J_MAX - abs(mm) + 1 for mm in range(-J_MAX, J_MAX + 1)}
    assert d["sectors"]["count"] == len(want) == 2 * J_MAX + 1
    assert dict(zip(d["sectors"]["names"], d["sectors"]["sizes"])) == want
    assert d["conserved"] == ["M"]
    assert d["level_sectors"] == {"|1,0⟩": "M 0", "|2,1⟩": "M +1"}
    md = to_markdown(r)
    assert "## Symmetry sectors" in md and "declared conserved operator(s) M" in md
    assert f"| \\|1,0⟩ | M 0 | {J_MAX + 1} |" in md and f"| \\|2,1⟩ | M +1 | {J_MAX} |" in md
    assert "| declared conserved operators | M |" in md


def test_one_sector_model_says_so():
    m = Model(np.diag([0.0, 1.0, 2.5]), [[0, 0.1, 0.05], [0.1, 0, 0.1], [0.05, 0.1, 0]])
    md = to_markdown(run_check(m, [0], [2], coupling=0.2, convergence_order=10, n_points=5))
    assert "One sector" in md and "| declared conserved operators | none |" in md


def test_physical_coupling_is_shown_beside_lambda():
    # Jaynes–Cummings builder: λ = 1 is the physical coupling g (builder docstring)
    g = 0.066
    m = jaynes_cummings(g=g, n_photons=4)
    assert (m.coupling_scale, m.coupling_name) == (g, "g")
    lam = 1.5
    r = run_check(m, [1], [2], coupling=lam, rtol=1e-3, convergence_order=10, n_points=5)
    (v,) = r.verdicts
    (b,) = r.boundaries
    assert b.status == "found"
    assert f"at λ = 1.5 (g = {lam * g:.4g})" in v.text
    assert f"|λ| ≈ {abs(b.coupling):.4g} (g = {abs(b.coupling) * g:.4g})" in v.text
    md = to_markdown(r)
    assert f"| coupling λ | 1.5 (g = {lam * g:.4g}) |" in md
    assert f"| {abs(b.coupling):.4g} (g = {abs(b.coupling) * g:.4g}) |" in md  # the λ* column
    assert "| physical coupling at λ = 1 | g = 0.066 |" in md
    d = json.loads(to_json(r))["model"]
    assert (d["coupling_scale"], d["coupling_name"], d["coupling_unit"]) == (g, "g", None)
    (row,) = list(csv.DictReader(io.StringIO(boundaries_csv(r))))
    assert float(row["boundary_physical"]) == pytest.approx(b.coupling * g, rel=1e-12)
    assert float(row["coupling_physical"]) == pytest.approx(lam * g, rel=1e-12)


def test_builders_name_their_physical_coupling_and_none_when_it_is_zero():
    assert kerr_qubit_resonator(g=0.087, n_qubit=3, n_photons=3).physical_coupling(2.0) == "g = 0.174"
    assert linear_rotor(mu_e=0.5, j_max=2).physical_coupling(2.0) == "μE = 1"
    assert jaynes_cummings(g=0.0, n_photons=3).physical_coupling(1.0) == ""
    with pytest.raises(ValueError, match="coupling_name='g' needs coupling_scale"):
        Model(np.diag([0.0, 1.0]), np.eye(2), coupling_name="g")


# ----------------------------------------------------------------------------- model files
def write_ring(tmp_path, extra: str = "") -> str:
    h0, v, parity = ising_ring(4)
    np.save(tmp_path / "h0.npy", h0)
    np.save(tmp_path / "v.npy", v)
    sp.save_npz(tmp_path / "parity.npz", sp.csr_matrix(parity))
    f = tmp_path / "ring.toml"
    f.write_text(f"""
[model]
h0 = "h0.npy"
v = "v.npy"
coupling_scale = 2.5
coupling_unit = "MHz"
coupling_name = "h"
{extra}
[model.conserved]
parity = "parity.npz"
[check]
levels = [0, 1]
orders = [4]
coupling = 0.3
tol = 1e-4
""")
    return str(f)


def test_model_file_declares_conserved_operators(tmp_path):
    mf = load_model_file(write_ring(tmp_path))
    m = mf.model
    assert m.conserved_names == ("parity",)
    assert sorted(s.name for s in m.sectors) == ["parity +1", "parity -1"]
    assert m.sector_of(0) != m.sector_of(1)  # the ground doublet is split by the declared parity
    assert m.physical_coupling(0.3) == "h = 0.75 MHz"
    # brute force: the lowest eigenvalue of H on each parity eigenspace (numpy eigh of the parity matrix)
    h0, v, parity = ising_ring(4)
    w, u = np.linalg.eigh(parity)
    got = track(m, [0, 1], [0.3]).energies[:, 0]
    for lev, e in zip((0, 1), got):
        q = m.sectors[m.sector_of(lev)].quantum_numbers[0]
        basis = u[:, np.isclose(w, q)]
        assert e == pytest.approx(np.linalg.eigvalsh(basis.T @ (h0 + 0.3 * v) @ basis)[0], abs=1e-12)


def test_check_command_reports_the_declared_sectors(tmp_path, capsys):
    f = write_ring(tmp_path)
    out = tmp_path / "rep"
    assert main(["check", f, "--out", str(out), "--no-figures"]) in (0, 1), capsys.readouterr().err
    text = capsys.readouterr().out
    assert re.search(r"at λ = 0\.3 \(h = 0\.75 MHz\)", text)
    d = json.loads((out / "report.json").read_text())
    assert d["model"]["conserved"] == ["parity"]
    assert d["model"]["sectors"]["names"] == ["parity +1", "parity -1"]
    md = (out / "report.md").read_text()
    assert "parity +1" in md and "declared conserved operator(s) parity" in md


@pytest.mark.parametrize(
    "extra, missing_file, message",
    [
        ('builtin = "two_level"', False, r"names a built-in model and also .*conserved"),
        ("", True, r"conserved operator 'parity'.*does not exist"),
    ],
)
def test_bad_conserved_declarations_are_clear_errors(tmp_path, extra, missing_file, message):
    f = write_ring(tmp_path, extra)
    if missing_file:
        (tmp_path / "parity.npz").unlink()
    with pytest.raises((ValueError, FileNotFoundError), match=message):
        load_model_file(f)


def test_a_conserved_operator_that_does_not_commute_names_the_file(tmp_path):
    f = write_ring(tmp_path)
    np.save(tmp_path / "z.npy", np.kron(np.diag([1.0, -1.0]), np.eye(8)))  # σz on site 0: not conserved by V
    path = tmp_path / "ring.toml"
    path.write_text(path.read_text().replace('parity = "parity.npz"', 'parity = "z.npy"'))
    with pytest.raises(ValueError, match=r"ring\.toml.*conserved operator 'parity' does not commute with v"):
        load_model_file(f)


def test_help_documents_conserved_operators_and_the_physical_coupling(capsys):
    assert main(["check", "--help"]) == 0
    out = capsys.readouterr().out
    assert "[model.conserved]" in out and "coupling_scale" in out


def test_kerr_chi_report_names_g():
    m = kerr_qubit_resonator(n_qubit=3, n_photons=4)
    r = run_check(m, [dispersive_shift()], [2], coupling=0.5, rtol=0.05, convergence_order=8, n_points=5)
    assert "(g = 0.05)" in r.verdicts[0].text
