"""Every ```python block of the README runs as pasted, in a fresh interpreter (common practice, no source)."""

import re
import subprocess
import sys
from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"
BLOCKS = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def test_readme_has_python_blocks():
    assert len(BLOCKS) >= 3


@pytest.mark.parametrize("i", range(len(BLOCKS)))
def test_readme_block_runs_as_pasted(i, tmp_path):
    r = subprocess.run([sys.executable, "-c", BLOCKS[i]], capture_output=True, text=True, cwd=tmp_path, timeout=240)
    assert r.returncode == 0, f"README python block {i} failed:\n{BLOCKS[i]}\n--- stderr ---\n{r.stderr[-3000:]}"
