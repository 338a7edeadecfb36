"""The engine never imports matplotlib or ipywidgets (import graph runs one way)."""

import subprocess
import sys

ENGINE = [
    "ptcheck",
    "ptcheck.model",
    "ptcheck.series",
    "ptcheck.blocks",
    "ptcheck.exact",
    "ptcheck.formula",
    "ptcheck.compare",
    "ptcheck.convergence",
    "ptcheck.degeneracy",
    "ptcheck.quantities",
    "ptcheck.treatment",
    "ptcheck.models",
    "ptcheck.products",
    "ptcheck.maps",
    "ptcheck.photons",
    "ptcheck._format",
    "ptcheck.modelfile",
    "ptcheck._atomic",
    "ptcheck.multiseries",
    "ptcheck.multiexact",
    "ptcheck.region",
    "ptcheck.multiformula",
    "ptcheck.region_report",
]


def test_engine_imports_without_matplotlib_or_widgets():
    code = (
        "import sys\n"
        "class Block:\n"
        "    def find_spec(self, name, path=None, target=None):\n"
        "        if name.split('.')[0] in ('matplotlib', 'ipywidgets', 'ipympl'):\n"
        "            raise ImportError('blocked for the test: ' + name)\n"
        "sys.meta_path.insert(0, Block())\n"
        "import importlib\n"
        f"for m in {ENGINE!r}:\n"
        "    importlib.import_module(m)\n"
        "bad = [m for m in sys.modules if m.split('.')[0] in ('matplotlib', 'ipywidgets')]\n"
        "assert not bad, bad\n"
        "print('ok')\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "ok"


def test_the_command_line_starts_without_scipy_optimize():
    # scipy.optimize loads scipy.special, scipy.spatial, scipy.fft ...: as long to import as the rest of
    # scipy that ptcheck needs, paid by every command.  The engine brings its own root finder and takes
    # the Hungarian method from scipy only when an assignment is ambiguous (common practice, no source).
    code = "import sys, ptcheck.cli, ptcheck.report, ptcheck.maps\nprint('scipy.optimize' in sys.modules)\n"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
