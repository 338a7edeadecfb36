"""Every ```python block of README.md runs (in order, in one fresh interpreter, warnings as errors).

The blocks are run as a reader would paste them into one session: later blocks may use names of earlier
ones.  Common practice, no source.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def python_blocks(text: str) -> list[str]:
    return re.findall(r"^```python\n(.*?)^```", text, flags=re.S | re.M)


def test_readme_has_python_examples():
    assert len(python_blocks((ROOT / "README.md").read_text(encoding="utf-8"))) >= 2


def test_every_readme_python_block_runs(tmp_path):
    blocks = python_blocks((ROOT / "README.md").read_text(encoding="utf-8"))
    script = tmp_path / "readme_blocks.py"
    script.write_text("\n\n".join(f"# --- README block {i + 1}\n{b}" for i, b in enumerate(blocks)), encoding="utf-8")
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + ([env["PYTHONPATH"]] if env.get("PYTHONPATH") else []))
    env["MPLBACKEND"] = "Agg"
    done = subprocess.run(
        [sys.executable, "-W", "error", str(script)], cwd=tmp_path, env=env, capture_output=True, text=True,
        timeout=300, stdin=subprocess.DEVNULL,
    )
    assert done.returncode == 0, f"README example failed:\n{done.stderr[-3000:]}"
