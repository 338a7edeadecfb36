"""The full check and its report files: verdicts against closed forms, JSON/CSV/Markdown, atomic writing."""

import csv
import io
import json
import math
import os
import re

import numpy as np
import pytest
from scipy.optimize import brentq

from ptcheck import report as rp
from ptcheck._atomic import ReportExistsError
from ptcheck.models import two_level
from ptcheck.report import FORMATS, Figure, run_check, to_json, write_report

DELTA, V = 1.0, 0.2


# Two-level system H = diag(-Δ/2, Δ/2) + λ v σx: exact ground level E = -√((Δ/2)² + λ²v²)
# (any QM text).  Its Taylor series in λ (binomial series of the square root):
# E = -Δ/2 - λ²v²/Δ + λ⁴v⁴/Δ³ - 2 λ⁶v⁶/Δ⁵ + ...
def exact_ground(lam):
    return -math.sqrt((DELTA / 2) ** 2 + (lam * V) ** 2)


def rs_ground(lam, order):
    terms = [-DELTA / 2, 0.0, -(lam * V) ** 2 / DELTA, 0.0, (lam * V) ** 4 / DELTA**3, 0.0, -2 * (lam * V) ** 6 / DELTA**5]
    return sum(terms[: order + 1])


def closed_form_boundary(order, tol):
    return brentq(lambda x: abs(rs_ground(x, order) - exact_ground(x)) - tol, 1e-3, 0.99 * DELTA / (2 * V))


@pytest.fixture(scope="module")
def report():
    m = two_level(delta=DELTA, v=V)
    return run_check(m, [0], [2, 4], coupling=0.45, tol=1e-5, treatment="nondegenerate", title="two-level check")


def test_verdicts_match_closed_form(report):
    v2, v4 = report.verdicts
    # errors at λ = 0.45 against the closed form (source: any QM text, see exact_ground)
    assert v2.error == pytest.approx(abs(rs_ground(0.45, 2) - exact_ground(0.45)), rel=1e-9)
    assert v4.error == pytest.approx(abs(rs_ground(0.45, 4) - exact_ground(0.45)), rel=1e-6)
    assert (v2.valid, v4.valid) == (False, True)
    assert report.valid is False and report.exit_status == 1
    # validity boundaries: roots of the closed-form error (boundary precision xrtol = 1e-3)
    assert report.boundaries[0].coupling == pytest.approx(closed_form_boundary(2, 1e-5), rel=2e-3)
    assert report.boundaries[1].coupling == pytest.approx(closed_form_boundary(4, 1e-5), rel=2e-3)
    # the series has only even powers, so order 3 = order 2 and order 4 is the lowest sufficient one
    assert report.lowest_valid_order == {"g": 4}
    assert report.verdict_text.startswith("NOT VALID")


def test_convergence_on_an_executor_gives_the_same_report(report):
    # run_check(executor=...) runs the convergence diagnosis there: the report must not change.  The radius
    # itself is the closed form: √((Δ/2)² + λ²v²) branches at λ = ±iΔ/(2v) (any QM text; see exact_ground).
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    m = two_level(delta=DELTA, v=V)
    kw = dict(coupling=0.45, tol=1e-5, treatment="nondegenerate", title="two-level check")
    pools = [ThreadPoolExecutor(1)]
    if "fork" in mp.get_all_start_methods():
        pools.append(ProcessPoolExecutor(1, mp_context=mp.get_context("fork")))
    for pool in pools:
        with pool:
            other = run_check(m, [0], [2, 4], executor=pool, **kw)
        assert to_json(other) == to_json(report)
    assert report.convergence[0].radius == pytest.approx(DELTA / (2 * V), rel=1e-6)


def test_json_is_strict_and_complete(report):
    text = to_json(report)

    def refuse(name):
        raise AssertionError(f"non-standard JSON constant {name}")

    d = json.loads(text, parse_constant=refuse)
    assert d["ptcheck_version"] == report.settings["ptcheck_version"]
    assert d["settings"]["tol"] == 1e-5 and d["settings"]["coupling"] == 0.45
    assert d["settings"]["orders"] == [2, 4]  # orders as numbers (ptcheck.report.ORDER_FORMAT)
    assert d["verdict"]["valid"] is False and d["verdict"]["exit_status"] == 1
    per = d["verdict"]["per_target"]
    assert [p["valid"] for p in per] == [False, True]
    assert [p["order"] for p in per] == [2, 4] and d["boundaries"][0]["order"] == 2
    assert d["verdict"]["lowest_valid_order"] == {"g": 4}
    assert d["comparison"]["orders"][:2] == [2, 4] and "order" in d["conventions"]
    assert per[0]["error"] == report.verdicts[0].error
    assert d["boundaries"][0]["coupling"] == report.boundaries[0].coupling
    assert np.array(d["comparison"]["exact"]).shape == report.comparison.exact.shape
    assert d["model"]["n"] == 2 and d["convergence"][0]["kind"] == "convergent"


def test_csv_tables(report):
    rows = list(csv.DictReader(io.StringIO(rp.comparison_csv(report))))
    c = report.comparison
    assert len(rows) == len(c.targets) * len(c.orders) * c.couplings.size
    r = next(r for r in rows if r["order"] == "order 2" and float(r["coupling"]) == 0.45)
    assert float(r["exact"]) == pytest.approx(exact_ground(0.45), rel=1e-12)
    b = list(csv.DictReader(io.StringIO(rp.boundaries_csv(report))))
    assert [x["valid"] for x in b] == ["False", "True"]
    assert float(b[0]["boundary"]) == report.boundaries[0].coupling


def test_markdown_states_verdict_and_cautions(report):
    md = rp.to_markdown(report, figures=[Figure("errors.png", "cap", b"")])
    assert "**NOT VALID:**" in md
    assert "## Cautions" in md and "Basis truncation" in md  # matrices given: the truncation caution is stated
    assert "![cap](errors.png)" in md
    assert "g, order 2: error" in md


def test_write_report_all_formats_with_figures(report, tmp_path):
    files = write_report(report, tmp_path / "out")
    names = {p.name for p in files}
    assert {"report.json", "report.md", "comparison.csv", "boundaries.csv"} <= names
    pngs = [p for p in files if p.suffix == ".png"]
    assert pngs and all(p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for p in pngs)
    md = (tmp_path / "out" / "report.md").read_text(encoding="utf-8")
    for p in pngs:
        assert f"]({p.name})" in md
    assert files[-1].name == "report.json"  # written last
    assert not list((tmp_path / "out").glob("*.tmp"))


def test_formats_and_figure_step_are_pluggable(report, tmp_path, monkeypatch):
    files = write_report(report, tmp_path / "j", formats=["json"])
    assert [p.name for p in files] == ["report.json"]
    files = write_report(report, tmp_path / "nofig", formats=["md"], figures=False)
    assert [p.name for p in files] == ["report.md"]
    files = write_report(report, tmp_path / "mine", formats=["md"], figures=lambda r: [Figure("x.png", "mine", b"png!")])
    assert (tmp_path / "mine" / "x.png").read_bytes() == b"png!"
    # without ptcheck.plots the report still gets a figure of its own
    monkeypatch.setattr(rp, "_plots_module", lambda: None)
    files = write_report(report, tmp_path / "fallback", formats=["md"])
    assert (tmp_path / "fallback" / "errors.png").exists()
    with pytest.raises(ValueError, match="format"):
        write_report(report, tmp_path / "bad", formats=["pdf"])
    assert set(FORMATS) == {"json", "md", "csv"}


def test_overwrite_rules(report, tmp_path):
    out = tmp_path / "r"
    write_report(report, out, formats=["json", "csv"])
    before = (out / "report.json").stat().st_mtime_ns
    write_report(report, out, formats=["json", "csv"])  # same content: fine, untouched
    assert (out / "report.json").stat().st_mtime_ns == before
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    with pytest.raises(ReportExistsError, match="force"):
        write_report(other, out, formats=["json", "csv"])
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.45  # nothing written
    write_report(other, out, formats=["json", "csv"], force=True)
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.25


def snapshot(folder):
    """Every entry of a folder and its bytes."""
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def strays(parent):
    """Temporary folders, lock files or set-aside reports left beside the report."""
    return sorted(p.name for p in parent.iterdir() if ".ptcheck-" in p.name)


def signal_at_file(monkeypatch, k):
    """Send SIGINT to this process while the k-th report file is being written (counting from 1)."""
    import signal

    real = os.fsync
    calls = {"n": 0}

    def fsync(fd):
        calls["n"] += 1
        if calls["n"] == k:
            os.kill(os.getpid(), signal.SIGINT)
        return real(fd)

    monkeypatch.setattr("ptcheck._atomic.os.fsync", fsync)
    return calls


@pytest.mark.parametrize("k", [1, 3])
def test_interrupt_while_writing_leaves_the_previous_report(report, tmp_path, monkeypatch, k):
    out = tmp_path / "r"
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    write_report(other, out, formats=["json", "csv", "md"], figures=False)
    before = snapshot(out)
    signal_at_file(monkeypatch, k)
    with pytest.raises(KeyboardInterrupt):
        write_report(report, out, formats=["json", "csv", "md"], figures=False, force=True)
    assert snapshot(out) == before  # the previous report, complete and untouched
    assert strays(tmp_path) == []


def test_interrupt_during_the_swap_is_delivered_after_it(report, tmp_path, monkeypatch):
    out = tmp_path / "r"
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    write_report(other, out, formats=["json", "csv"], figures=False)
    import signal

    from ptcheck import _atomic

    real_swap = _atomic._swap_in

    def swap(new, target):  # the signal arrives in the middle of the swap
        os.kill(os.getpid(), signal.SIGINT)
        return real_swap(new, target)

    monkeypatch.setattr(_atomic, "_swap_in", swap)
    with pytest.raises(KeyboardInterrupt):
        write_report(report, out, formats=["json", "csv"], figures=False, force=True)
    d = json.loads((out / "report.json").read_text())
    assert d["settings"]["coupling"] == 0.45  # the new report, complete
    assert sorted(p.name for p in out.iterdir()) == [".ptcheck-report", "boundaries.csv", "comparison.csv", "report.json"]
    assert rp.read_fingerprint(out) == rp.report_fingerprint(report)
    assert strays(tmp_path) == []


def test_a_failing_file_leaves_the_previous_report(report, tmp_path, monkeypatch):
    out = tmp_path / "r"
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    write_report(other, out, formats=["json", "csv"], figures=False)
    before = snapshot(out)
    real = os.fsync
    calls = {"n": 0}

    def disk_full(fd):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError(28, "No space left on device")
        return real(fd)

    monkeypatch.setattr("ptcheck._atomic.os.fsync", disk_full)
    with pytest.raises(OSError, match="No space left"):
        write_report(report, out, formats=["json", "csv"], figures=False, force=True)
    assert snapshot(out) == before and strays(tmp_path) == []


def test_force_replaces_the_whole_folder(report, tmp_path):
    out = tmp_path / "r"
    write_report(report, out, figures=lambda r: [Figure("old.png", "old figure", b"png")])
    assert (out / "old.png").exists()
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    write_report(other, out, figures=False, force=True)
    assert not (out / "old.png").exists()  # nothing of the previous report stays behind
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.25


def test_same_report_with_figures_added_needs_no_force(report, tmp_path):
    out = tmp_path / "r"
    write_report(report, out, figures=False)
    write_report(report, out, figures=lambda r: [Figure("x.png", "mine", b"png!")])  # same settings and results
    assert (out / "x.png").read_bytes() == b"png!"


def test_fingerprint_is_content_not_spelling(report):
    d = report.to_dict()
    d["model"]["source"] = {"model_file": "./g.toml", "kind": "builtin"}
    e = json.loads(json.dumps(d))
    e["model"]["source"]["model_file"] = "/somewhere/else/g.toml"
    e["versions"]["numpy"] = "0.0"
    assert rp.report_fingerprint(d) == rp.report_fingerprint(e)
    e["settings"]["coupling"] = 0.5
    assert rp.report_fingerprint(d) != rp.report_fingerprint(e)


def test_files_follow_the_umask(report, tmp_path):
    old = os.umask(0o027)
    try:
        write_report(report, tmp_path / "r", formats=["json"])
    finally:
        os.umask(old)
    assert (tmp_path / "r").stat().st_mode & 0o777 == 0o750
    assert (tmp_path / "r" / "report.json").stat().st_mode & 0o777 == 0o640


@pytest.mark.parametrize("bad", ["", "   "])
def test_empty_output_folder_is_refused(report, bad):
    with pytest.raises(ValueError, match="output folder name is empty"):
        write_report(report, bad)


def test_unusable_output_folders_are_refused(report, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(ValueError, match="is the current folder or contains it"):
        write_report(report, ".")
    with pytest.raises(ValueError, match="is the current folder or contains it"):
        write_report(report, tmp_path.parent)
    (tmp_path / "f").write_text("x")
    with pytest.raises(ValueError, match="is a file"):
        write_report(report, tmp_path / "f")
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "notes.txt").write_text("keep me")
    with pytest.raises(ValueError, match=r"not part of a ptcheck report \('notes.txt'\)"):
        write_report(report, mine, force=True)
    assert (mine / "notes.txt").read_text() == "keep me"


def test_report_of_an_earlier_version_is_recognised(report, tmp_path):
    out = tmp_path / "r"
    write_report(report, out, formats=["json", "csv"])
    (out / ".ptcheck-report").unlink()  # as written by an earlier version: no marker
    write_report(report, out, formats=["json", "csv"])  # same content: recognised from report.json, no force
    other = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="nondegenerate")
    (out / ".ptcheck-report").unlink()
    with pytest.raises(ReportExistsError, match="force"):
        write_report(other, out, formats=["json"])


def test_a_second_writer_fails_cleanly_while_the_first_holds_the_folder(report, tmp_path, monkeypatch):
    from ptcheck import _atomic

    out = tmp_path / "r"
    real = os.fsync
    seen = {}

    def nested(fd):  # while the first writer writes, a second one tries the same folder
        if not seen:
            with pytest.raises(rp.ReportBusyError, match="another ptcheck process is writing"):
                seen["busy"] = True
                _atomic.write_folder(out, {"a.txt": "x"}, fingerprint="other")
        return real(fd)

    monkeypatch.setattr("ptcheck._atomic.os.fsync", nested)
    write_report(report, out, formats=["json"])
    assert seen == {"busy": True}
    assert json.loads((out / "report.json").read_text())["settings"]["coupling"] == 0.45


def test_serializer_failure_writes_nothing(report, tmp_path, monkeypatch):
    def boom(*a, **k):
        raise RuntimeError("serializer failed midway")

    monkeypatch.setattr(rp, "to_json", boom)
    with pytest.raises(RuntimeError):
        write_report(report, tmp_path / "r", formats=["csv", "json"])
    assert not (tmp_path / "r").exists() or not list((tmp_path / "r").iterdir())


def test_bad_input():
    m = two_level()
    with pytest.raises(ValueError, match="not both"):
        run_check(m, [0], [2], coupling=0.1, tol=1e-3, rtol=1e-2)
    with pytest.raises(ValueError, match="unknown level"):
        run_check(m, ["x"], [2], coupling=0.1)
    with pytest.raises(ValueError, match="order"):
        run_check(m, [0], ["two"], coupling=0.1)
    with pytest.raises(TypeError, match="Model"):
        run_check("two_level", [0], [2], coupling=0.1)


def test_failed_boundary_search_is_reported_not_raised(monkeypatch):
    real = rp.validity_boundary

    def auto_fails(model, target, spec, *, treatment, **kw):
        if treatment == "auto":
            raise ValueError("the block grows beyond max_size")
        return real(model, target, spec, treatment=treatment, **kw)

    monkeypatch.setattr(rp, "validity_boundary", auto_fails)
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5)
    (b,) = r.boundaries  # the default treatment is not 'auto': unaffected
    assert b.status == "found" and b.treatment == "nondegenerate"
    assert b.coupling == pytest.approx(closed_form_boundary(2, 1e-5), rel=2e-3)  # closed form, as above
    # asked for 'auto', a failing search is reported as such, never swapped for another treatment
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5, treatment="auto")
    assert r.boundaries[0].status == "error" and any("search failed" in c for c in r.cautions)

    def always_fails(*a, **k):
        raise ValueError("no luck")

    monkeypatch.setattr(rp, "validity_boundary", always_fails)
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.25, tol=1e-5)
    assert r.boundaries[0].status == "error" and math.isnan(r.boundaries[0].coupling)
    assert r.verdicts[0].valid  # the error at λ is still judged from the comparison
    assert any("search failed" in c for c in r.cautions)
    json.loads(to_json(r), parse_constant=lambda c: pytest.fail(c))


def test_suggestions_sit_beside_a_verdict_on_what_was_asked():
    # two-level system at λ = 0.9 (mixing ratio λv/Δ = 0.18 > 0.1): the order-2 series fails (closed form above),
    # the block of both levels would be exact; the verdict and exit status still judge the order-2 series
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.9, tol=1e-5, convergence_order=10, n_points=9)
    assert r.verdicts[0].treatment == "nondegenerate" and not r.valid and r.exit_status == 1
    (g,) = r.suggestions
    assert g.partner == 1 and g.exact_in_sector and g.mixing_ratio == pytest.approx(0.9 * V / DELTA)
    md = rp.to_markdown(r)
    assert "## Suggestions" in md and "## Treatment" in md
    d = json.loads(to_json(r))
    assert d["suggestions"][0]["partner"] == 1 and d["verdict"]["per_target"][0]["status"] == "not valid"


def test_shift_quantity_is_presented_as_a_shift_in_every_report_file():
    from ptcheck import Model
    from ptcheck.quantities import stark_shift

    m = Model(np.diag([0.0, 1.0, 2.3]), [[0, 0.1, 0.05], [0.1, 0, 0.2], [0.05, 0.2, 0]])
    q = stark_shift(1, 0, name="Lamb")
    r = run_check(m, [q], [2], coupling=0.5, rtol=0.05, convergence_order=10, n_points=9)
    # brute force: eigvalsh difference minus the unperturbed transition (1.0)
    ev = np.linalg.eigvalsh(m.hamiltonian(0.5))
    shift = ev[1] - ev[0] - 1.0
    rows = list(csv.DictReader(io.StringIO(rp.comparison_csv(r))))
    at = [row for row in rows if float(row["coupling"]) == 0.5 and row["order"] == "order 2"]
    assert at[0]["presents"] == "shift" and float(at[0]["exact_presented"]) == pytest.approx(shift, abs=1e-12)
    assert float(at[0]["unperturbed"]) == pytest.approx(1.0)
    assert f"{shift:.10g} (shift)" in rp.to_markdown(r)
    d = json.loads(to_json(r))
    assert d["comparison"]["presents"] == ["shift"]


# ---------------------------------------------------------------------- presentation of the report
def test_pade_orders_in_json_and_convergent_series_have_no_optimal_order():
    m = two_level(delta=DELTA, v=V)
    r = run_check(m, [0], [2, "pade1/1@2"], coupling=0.45, tol=1e-5, treatment="nondegenerate")
    d = json.loads(to_json(r))
    assert d["settings"]["orders"] == [2, {"pade": [1, 1], "in_square": True}]
    assert d["verdict"]["per_target"][1]["order"] == {"pade": [1, 1], "in_square": True}
    (conv,) = d["convergence"]
    assert conv["kind"] == "convergent"
    assert conv["optimal_order"] is None and conv["smallest_term"] is None  # a convergent series has no optimal order
    assert not any("optimal order" in n for n in d["notes"])
    md = rp.to_markdown(r)
    assert "optimal order" not in md


def test_complex_numbers_rounded_and_cleaned():
    from ptcheck._format import clean_complex, fmt_complex

    # closed form: the two-level EPs sit at λ = ±iΔ/(2v) = ±2.5i (purely imaginary)
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.45, tol=1e-5, treatment="nondegenerate")
    d = json.loads(to_json(r))
    eps = d["convergence"][0]["exceptional_points"]
    assert eps and all(z[0] == 0.0 for z in eps)  # round-off real parts removed
    assert sorted(z[1] for z in eps) == pytest.approx([-2.5, 2.5], rel=1e-6)
    summary = d["convergence"][0]["summary"]
    assert "2.5i" in summary and not re.search(r"\dj\b|\de-\d\d", summary)  # no Python complex, no round-off digits
    assert fmt_complex(complex(-4.2e-23, 7.35)) == "7.35i"
    assert fmt_complex(complex(1.2, -7.35)) == "1.2 − 7.35i" and fmt_complex(-0.5) == "−0.5"
    assert clean_complex(complex(3e-20, -2.0)) == complex(0.0, -2.0)
    assert rp._json_safe(np.complex128(complex(1e-30, 1.0))) == [0.0, 1.0]


def test_several_tolerances_in_one_run_each_with_its_boundary():
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.45, tol=[1e-5, 1e-4], treatment="nondegenerate")
    (v,) = r.verdicts
    assert v.tolerance == 1e-5  # the first tolerance is the one judged
    (b5,), (b4,) = r.boundaries, r.other_boundaries
    assert b4.tol == 1e-4
    assert b4.coupling == pytest.approx(closed_form_boundary(2, 1e-4), rel=2e-3)  # closed form (see exact_ground)
    d = json.loads(to_json(r))
    assert d["settings"]["other_tolerances"] == [1e-4] and d["other_boundaries"][0]["order"] == 2
    assert "Validity boundaries at the other tolerances" in rp.to_markdown(r)
    (err,) = [f for f in rp.default_figures(r) if f.filename.startswith("errors")]
    assert err.filename.endswith(".png") and "tolerances" in err.caption


def test_coupling_sweep_is_the_comparison_grid():
    sweep = np.linspace(0.1, 0.6, 6)
    r = run_check(two_level(delta=DELTA, v=V), [0], [2], coupling=0.45, tol=1e-5, treatment="nondegenerate", couplings=sweep)
    assert np.array_equal(r.comparison.couplings, np.unique(np.append(sweep, 0.45)))
    assert r.settings["sweep"] == [0.1, 0.6, 6]


@pytest.mark.parametrize("fmt, magic", [("png", b"\x89PNG"), ("svg", b"<?xml"), ("pdf", b"%PDF-")])
def test_figure_formats_slide_size_and_same_bytes_on_a_rerun(report, fmt, magic):
    figs = rp.default_figures(report, figure_format=fmt)
    assert figs and all(f.filename.endswith("." + fmt) and f.format == fmt and f.data.startswith(magic) for f in figs)
    fig, ax = rp._new_figure()
    ax.plot([0, 1], [0, 1])
    assert rp._render(fig, fmt=fmt) == rp._render(fig, fmt=fmt)  # no timestamps: a re-run is the same report
    if fmt == "png":
        from PIL import Image

        with Image.open(io.BytesIO(figs[0].data)) as im:
            assert im.size == (1333, 750)  # 13.33 x 7.5 in (16:9 slide) at 100 dpi
    with pytest.raises(ValueError, match="figure format"):
        rp.default_figures(report, figure_format="jpg")


def test_study_figures_drawn_alone_are_the_report_figures(report):
    # a side study's figure drawn on its own (as soon as the study is done) is byte for byte the figure the
    # report draws from its extras (common practice, no source: drawing it earlier must not change it)
    from dataclasses import replace

    from ptcheck.maps import validity_map
    from ptcheck.models import jaynes_cummings
    from ptcheck.photons import photon_boundaries

    jc = jaynes_cummings(n_photons=6)
    jc.coupling_scale, jc.coupling_unit = 50.0, "MHz"
    pb = photon_boundaries(jc, 2, rtol=0.01, photons=[0, 1])
    vm = validity_map("two_level", "delta", [0.8, 1.2], level=0, order=2, rtol=0.01, couplings=[0.1, 0.3],
                      builder_kwargs={"v": V}, treatment="nondegenerate", executor="serial")
    r = replace(report, source_model=jc, extras={"validity_map": vm, "validity_map_mark": (1.0, 0.2),
                                                 "energy_unit": "GHz", "photon_boundaries": pb})
    alone = rp.draw_study_figure(pb, coupling_scale=50.0, coupling_unit="MHz")
    assert alone == rp.draw_figure(r, ("photons",)) and alone.filename == "photons.png"
    assert rp.draw_study_figure(vm, mark=(1.0, 0.2), unit="GHz") == rp.draw_figure(r, ("validity_map",))
    assert rp.draw_study_figure(pb) != alone  # the second coupling axis is drawn: the figure depends on it


def test_boilerplate_said_once():
    texts = ["Level a: radius 2. These are estimates: check them.", "Level b: radius 3. These are estimates: check them."]
    assert rp.said_once(texts) == ["Level a: radius 2. These are estimates: check them.", "Level b: radius 3."]
    assert rp.said_once(["Same. Same.", "Same."]) == ["Same.", ""]
    # a sentence with numbers is data about its own level: never dropped
    assert rp.said_once(["a: bound 0.75.", "b: bound 0.75."]) == ["a: bound 0.75.", "b: bound 0.75."]
