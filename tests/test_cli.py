"""The command line end to end (``python -m ptcheck`` in a subprocess), exit statuses and report files.

Physics: a two-level system H = diag(-Δ/2, Δ/2) + λ v σx, whose ground level is
E = -√((Δ/2)² + λ²v²) (any QM text) and whose second-order RS value is
-Δ/2 - λ²v²/Δ (the first terms of the binomial series of that square root).
"""

import csv
import io
import json
import math
import os
import re
import signal
import subprocess
import sys
import time
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
    assert sorted(p.name for p in (tmp_path / "rep").iterdir()) == [".ptcheck-report", "report.json"]


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


def test_interrupted_write_leaves_the_previous_report_and_says_so(tmp_path, capsys, monkeypatch):
    import signal

    f = builtin_toml(tmp_path, 0.25)
    out = tmp_path / "rep"
    assert main(["check", str(f), "--out", str(out), "--no-figures"]) == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    real = os.fsync
    calls = {"n": 0}

    def fsync(fd):  # SIGINT while the second file of the new report is being written
        calls["n"] += 1
        if calls["n"] == 2:
            os.kill(os.getpid(), signal.SIGINT)
        return real(fd)

    monkeypatch.setattr("ptcheck._atomic.os.fsync", fsync)
    capsys.readouterr()
    assert main(["check", str(f), "--out", str(out), "--no-figures", "--coupling", "0.45", "--force"]) == 130
    line = one_error_line(capsys.readouterr().err)
    assert "interrupted before the report was written" in line and "still holds the previous report, unchanged" in line
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert not [p for p in tmp_path.iterdir() if ".ptcheck-" in p.name]  # no temporary folders or locks left


def test_internal_error_has_its_own_exit_status(tmp_path, capsys, monkeypatch):
    f = builtin_toml(tmp_path, 0.25)

    def broken_dumps(*a, **k):
        raise RuntimeError("serializer died midway")

    monkeypatch.setattr("ptcheck.report.json.dumps", broken_dumps)
    assert main(["check", str(f), "--out", str(tmp_path / "rep"), "--no-figures"]) == 3
    line = one_error_line(capsys.readouterr().err)
    assert "internal error: RuntimeError: serializer died midway" in line and "bug" in line
    assert not (tmp_path / "rep").exists() or not list((tmp_path / "rep").iterdir())

    def out_of_memory(*a, **k):
        raise MemoryError

    monkeypatch.setattr("ptcheck.report.run_check", out_of_memory)
    assert main(["check", str(f), "--out", str(tmp_path / "rep2"), "--no-figures"]) == 3
    assert "internal error: out of memory" in one_error_line(capsys.readouterr().err)


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


# ---------------------------------------------------------------------- faults: bad input, exit statuses
@pytest.mark.parametrize(
    "setup, args, match",
    [
        ("corrupt_npz", ["broken.npz", "--coupling", "0.1"], "BadZipFile"),
        ("photons", ["photons.toml", "--coupling", "0.1"], "n_photons must be an int <= 524288; got 10000000"),
        ("two_level", ["tl.toml", "--orders", "1000000"], "order 1000000 is beyond the limit of 1000"),
        ("two_level", ["tl.toml", "--coupling", "0"], "the coupling is 0"),
        ("two_level", ["tl.toml", "--out", ""], "--out is empty"),
        ("two_level", ["tl.toml", "--out", "."], "is the current folder or contains it"),
        ("two_level", ["tl.toml", "--out", "tl.toml"], "is a file"),
        ("two_level", ["tl.toml", "--rtol", "nan"], "rtol must be a positive finite number"),
        ("asymmetric", ["asym.toml", "--coupling", "0.1"], r"v is not Hermitian.*v\[0,1\] = 0.1 and v\[1,0\] = 0.2"),
        ("foreign", ["tl.toml", "--out", "mine", "--force"], "not part of a ptcheck report"),
    ],
)
def test_bad_input_exit_2_one_line(tmp_path, capsys, monkeypatch, setup, args, match):
    monkeypatch.chdir(tmp_path)
    builtin_toml(tmp_path, 0.25)
    if setup == "corrupt_npz":
        (tmp_path / "broken.npz").write_bytes(b"PK\x03\x04 damaged")
    elif setup == "photons":
        (tmp_path / "photons.toml").write_text('[model]\nbuiltin = "jaynes_cummings"\n[model.params]\nn_photons = 10000000\n',
                                               encoding="utf-8")
    elif setup == "asymmetric":
        v = np.zeros((3, 3))
        v[2, 2], v[1, 0], v[0, 1] = 1e10, 0.2, 0.1
        np.savez(tmp_path / "m.npz", h0=np.diag([0.0, 1.0, 2.0]), v=v)
        (tmp_path / "asym.toml").write_text('[model]\nmatrices = "m.npz"\n', encoding="utf-8")
    elif setup == "foreign":
        (tmp_path / "mine").mkdir()
        (tmp_path / "mine" / "notes.txt").write_text("keep me", encoding="utf-8")
    assert main(["check", *args, "--no-figures"]) == 2
    assert re.search(match, one_error_line(capsys.readouterr().err))
    if setup == "foreign":
        assert (tmp_path / "mine" / "notes.txt").read_text(encoding="utf-8") == "keep me"


def test_bad_input_in_a_subprocess_never_shows_a_traceback(tmp_path):
    # the two cases that crashed with a traceback before: a damaged archive and a huge builder size
    (tmp_path / "broken.npz").write_bytes(b"PK\x03\x04 damaged")
    r = run_cli("check", "broken.npz", "--coupling", 0.1, cwd=tmp_path)
    assert r.returncode == 2 and "BadZipFile" in one_error_line(r.stderr)
    (tmp_path / "p.toml").write_text('[model]\nbuiltin = "rabi"\n[model.params]\nn_photons = 10000000\n', encoding="utf-8")
    r = run_cli("check", "p.toml", "--coupling", 0.1, cwd=tmp_path)
    assert r.returncode == 2 and "n_photons" in one_error_line(r.stderr)


def test_help_documents_every_exit_status(capsys):
    assert main(["--help"]) == 0
    text = capsys.readouterr().out
    for code in ("0 ", "1 ", "2 ", "3 ", "130", "143"):
        assert f"  {code}" in text
    assert "internal error" in text


def test_same_check_with_the_model_file_named_another_way_is_the_same_report(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    f = builtin_toml(tmp_path, 0.25)
    for spelling in ("tl.toml", "./tl.toml", str(f.resolve())):
        assert main(["check", spelling, "--out", "rep", "--no-figures", "--format", "json"]) == 0, capsys.readouterr().err
    assert json.loads((tmp_path / "rep" / "report.json").read_text())["model"]["source"]["model_file"] == str(f.resolve())
    # adding figures (and the Markdown summary) to the same check is not a different report either
    assert main(["check", "tl.toml", "--out", "rep"]) == 0, capsys.readouterr().err
    assert list((tmp_path / "rep").glob("*.png"))


def test_force_without_figures_removes_the_old_figures(tmp_path, capsys):
    f = builtin_toml(tmp_path, 0.25)
    out = tmp_path / "rep"
    assert main(["check", str(f), "--out", str(out), "--format", "md"]) == 0
    assert list(out.glob("*.png"))
    assert main(["check", str(f), "--out", str(out), "--format", "md", "--no-figures", "--coupling", "0.45", "--force"]) == 1
    assert not list(out.glob("*.png")) and "λ = 0.45" in (out / "report.md").read_text(encoding="utf-8")


# ---------------------------------------------------------------------- faults: signals and concurrent writers
#: Runs the command line with every fsync slowed down by argv[1] seconds, so that a test can reach the
#: moment the report folder is being written.  Test scaffolding only.
SLOW_WRITER = (
    "import os, sys, time\n"
    "real = os.fsync\n"
    "os.fsync = lambda fd: (time.sleep(float(sys.argv[1])), real(fd))[1]\n"
    "from ptcheck.cli import main\n"
    "sys.exit(main(sys.argv[2:]))\n"
)


def start_cli(*args, cwd, slow=None):
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    cmd = [sys.executable, "-c", SLOW_WRITER, str(slow)] if slow is not None else [sys.executable, "-m", "ptcheck"]
    return subprocess.Popen([*cmd, *map(str, args)], cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, stdin=subprocess.DEVNULL)


def wait_for(predicate, proc, timeout=120.0):
    t0 = time.monotonic()
    while not predicate():
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() - t0 < timeout, "timed out"
        time.sleep(0.005)


def complete_report(folder):
    """The coupling of the report in ``folder``, after checking that every file belongs to that one report."""
    from ptcheck.report import report_fingerprint

    marker = json.loads((folder / ".ptcheck-report").read_text(encoding="utf-8"))
    assert sorted(p.name for p in folder.iterdir() if p.name != ".ptcheck-report") == sorted(marker["files"])
    d = json.loads((folder / "report.json").read_text(encoding="utf-8"))
    assert marker["fingerprint"] == report_fingerprint(d)
    lam = d["settings"]["coupling"]
    if (folder / "boundaries.csv").exists():
        rows = list(csv.DictReader(io.StringIO((folder / "boundaries.csv").read_text(encoding="utf-8"))))
        assert rows and all(float(r["coupling"]) == lam for r in rows)
    if (folder / "report.md").exists():
        assert f"at λ = {lam:g}" in (folder / "report.md").read_text(encoding="utf-8")
    return lam


def strays(parent):
    return sorted(p.name for p in parent.iterdir() if ".ptcheck-" in p.name)


@pytest.mark.parametrize("sig, delay", [(signal.SIGINT, 0.0), (signal.SIGTERM, 0.45), (signal.SIGINT, 1.0)])
def test_signal_during_a_forced_write_leaves_old_or_new_report_complete(tmp_path, capsys, sig, delay):
    f = builtin_toml(tmp_path, 0.25)
    out = tmp_path / "rep"
    assert main(["check", str(f), "--out", str(out), "--no-figures"]) == 0
    capsys.readouterr()
    # 7 slowed fsyncs (4 files, the marker, 2 folders) of 0.15 s: the write lasts about 1 s
    p = start_cli("check", f, "--out", out, "--no-figures", "--coupling", 0.45, "--force", cwd=tmp_path, slow=0.15)
    wait_for(lambda: any(".rep.ptcheck-new-" in n for n in os.listdir(tmp_path)), p)
    time.sleep(delay)
    p.send_signal(sig)
    _, err = p.communicate(timeout=120)
    lam = complete_report(out)
    assert lam in (0.25, 0.45)
    assert strays(tmp_path) == []
    assert p.returncode == (130 if sig == signal.SIGINT else 143)
    line = one_error_line(err)
    if lam == 0.45:  # the signal came once the new report was in place (or as the command was exiting)
        assert "holds the new report, complete" in line or "while starting or finishing" in line
    else:
        assert "still holds the previous report, unchanged" in line


@pytest.mark.parametrize("force", [False, True])
def test_concurrent_writers_never_mix(tmp_path, force):
    f = builtin_toml(tmp_path, 0.25)
    extra = ["--force"] if force else []
    procs = [start_cli("check", f, "--out", "race", "--no-figures", "--coupling", lam, *extra, cwd=tmp_path, slow=0.05)
             for lam in (0.2, 0.3)]
    results = [(p.wait(timeout=120), p.communicate()[1]) for p in procs]
    lam = complete_report(tmp_path / "race")
    codes = sorted(code for code, _ in results)
    winners = [code for code, _ in results if code in (0, 1)]
    assert winners, results
    for code, err in results:
        if code == 2:
            line = one_error_line(err)
            assert "another ptcheck process is writing" in line or "a different report already exists" in line
        else:
            assert code in (0, 1) and err.strip() == "", err
    if not force:
        assert codes in ([0, 2], [1, 2])  # exactly one report: the other writer was refused
    assert lam in (0.2, 0.3) and strays(tmp_path) == []


def test_interrupt_while_the_command_starts_is_one_line(tmp_path):
    psutil = pytest.importorskip("psutil")
    f = builtin_toml(tmp_path, 0.25)
    p = start_cli("check", f, "--out", "rep", cwd=tmp_path)
    proc = psutil.Process(p.pid)

    def importing_numpy():  # the package is being imported: Python's own start-up is over
        try:
            return any("numpy" in m.path for m in proc.memory_maps())
        except psutil.Error:
            return False

    wait_for(importing_numpy, p)
    p.send_signal(signal.SIGINT)
    _, err = p.communicate(timeout=120)
    assert p.returncode == 130
    assert one_error_line(err).startswith("ptcheck: error: interrupted")
    assert not (tmp_path / "rep").exists()


@pytest.mark.slow
@pytest.mark.parametrize("flags, workers", [(["--no-figures"], 1), ([], 2)])
def test_sigterm_to_demo_leaves_no_worker_processes(tmp_path, flags, workers):
    psutil = pytest.importorskip("psutil")
    p = start_cli("demo", "--out", "d", *flags, cwd=tmp_path)
    proc = psutil.Process(p.pid)
    # the side studies' worker runs (and, with figures, the drawing worker)
    wait_for(lambda: len(proc.children(recursive=True)) >= workers, p)
    workers = proc.children(recursive=True)
    p.send_signal(signal.SIGTERM)
    _, err = p.communicate(timeout=120)
    assert p.returncode == 143
    assert "terminated" in one_error_line(err)
    _, alive = psutil.wait_procs(workers, timeout=15)
    for w in alive:  # do not leave them behind even if the test fails
        w.kill()
    assert alive == []
    assert not (tmp_path / "d").exists()


@pytest.mark.slow
def test_demo_spread_over_workers_writes_the_same_files_as_one_process(tmp_path, monkeypatch):
    # the demo's parts run on forked workers where fork exists (ptcheck._demo); where it does not, one after
    # the other in one process.  Both must write byte-identical files (common practice, no source).
    assert main(["demo", "--out", str(tmp_path / "spread")]) == 0
    monkeypatch.setattr("ptcheck._demo.mp.get_all_start_methods", lambda: ["spawn"])
    assert main(["demo", "--out", str(tmp_path / "serial")]) == 0
    names = sorted(p.name for p in (tmp_path / "spread").iterdir())
    assert names == sorted(p.name for p in (tmp_path / "serial").iterdir())
    assert {"report.json", "validity-map.png", "photons.png", "convergence.png"} <= set(names)
    for name in names:
        assert (tmp_path / "spread" / name).read_bytes() == (tmp_path / "serial" / name).read_bytes(), name
