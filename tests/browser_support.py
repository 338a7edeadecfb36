"""Helpers for the real-browser test: a Voilà server on 127.0.0.1 and a watched Chromium page.

Set-up follows the project's browser recipe: isolated Jupyter/IPython/matplotlib
config in temporary folders, Debian's Chromium driven by Playwright (never a
downloaded browser), every non-loopback request answered locally, JavaScript
errors recorded.
"""

from __future__ import annotations

import io
import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path

CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "/usr/bin/chromium-browser", "/usr/bin/google-chrome")
CHROMIUM_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
    "--disable-component-update", "--disable-sync",
]


def find_chromium() -> str | None:
    """Path of a Chromium executable, or None."""
    for p in CHROMIUM_CANDIDATES:
        if os.path.exists(p) and os.access(p, os.X_OK):
            return p
    for name in ("chromium", "chromium-browser", "google-chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class VoilaServer:
    """A running Voilà server (stop with :meth:`stop`)."""

    proc: subprocess.Popen
    port: int
    tmp: Path
    log: Path

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, notebook: str) -> str:
        return f"{self.base}/voila/render/{notebook}"

    def stop(self) -> None:
        import psutil

        try:
            parent = psutil.Process(self.proc.pid)
            children = parent.children(recursive=True)
        except psutil.NoSuchProcess:
            children = []
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=5)
        # kernels run in their own sessions: end the ones this server started, by pid
        for child in children:
            try:
                child.kill()
            except psutil.NoSuchProcess:
                pass
        psutil.wait_procs(children, timeout=5)
        shutil.rmtree(self.tmp, ignore_errors=True)


def start_voila(root_dir: Path, *, timeout: float = 60.0) -> VoilaServer:
    """Start Voilà on a free loopback port serving ``root_dir``; wait until it answers."""
    tmp = Path(tempfile.mkdtemp(prefix="ptcheck_voila_"))
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    for var, sub in (("JUPYTER_CONFIG_DIR", "config"), ("JUPYTER_DATA_DIR", "data"), ("JUPYTER_RUNTIME_DIR", "runtime"),
                     ("IPYTHONDIR", "ipython"), ("MPLCONFIGDIR", "mpl")):
        (tmp / sub).mkdir()
        env[var] = str(tmp / sub)
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    # Voilà's templates live in <prefix>/share/jupyter; inside a virtual environment built on a
    # system Python they may sit under the base prefix only, so name both data paths explicitly.
    data_paths = dict.fromkeys(str(Path(p) / "share" / "jupyter") for p in (sys.prefix, sys.base_prefix))
    env["JUPYTER_PATH"] = os.pathsep.join(list(data_paths) + ([env["JUPYTER_PATH"]] if env.get("JUPYTER_PATH") else []))
    repo = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = repo + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    port = free_port()
    log = tmp / "voila.log"
    with open(log, "wb") as fh:
        proc = subprocess.Popen(
            [sys.executable, "-m", "voila", "--no-browser", f"--port={port}", "--Voila.ip=127.0.0.1",
             "--Voila.port_retries=0", "--show_tracebacks=True", f"--Voila.root_dir={root_dir}"],
            stdout=fh, stderr=subprocess.STDOUT, env=env, cwd=str(root_dir),
        )
    server = VoilaServer(proc, port, tmp, log)
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if proc.poll() is not None:
            break
        try:
            with urllib.request.urlopen(server.base + "/", timeout=2) as r:
                if r.status == 200:
                    return server
        except (urllib.error.URLError, ConnectionError, OSError):
            time.sleep(0.3)
    text = log.read_text(errors="replace")[-3000:]
    server.stop()
    raise RuntimeError(f"Voilà did not start within {timeout:.0f} s; log tail:\n{text}")


@dataclass
class PageWatch:
    """JavaScript errors seen on a page."""

    errors: list = field(default_factory=list)

    def attach(self, page) -> None:
        page.on("pageerror", lambda exc: self.errors.append(f"pageerror: {exc}"))
        page.on("console", lambda msg: self.errors.append(f"console error: {msg.text}") if msg.type == "error" else None)
        page.on("crash", lambda _p: self.errors.append("page crashed"))


def local_only(route) -> None:
    """Answer any request that would leave the machine with an empty 200 (offline CDN links)."""
    url = route.request.url
    if url.startswith(("http://127.0.0.1", "http://localhost", "ws://127.0.0.1", "data:", "blob:")):
        route.continue_()
    else:
        route.fulfill(status=200, body="", content_type="text/plain")


def png_diff_area(a: bytes, b: bytes) -> int:
    """Area (px) of the bounding box of the pixels that differ between two PNG screenshots."""
    from PIL import Image, ImageChops

    ia = Image.open(io.BytesIO(a)).convert("RGB")
    ib = Image.open(io.BytesIO(b)).convert("RGB")
    if ia.size != ib.size:
        return ia.size[0] * ia.size[1]
    box = ImageChops.difference(ia, ib).getbbox()
    return 0 if box is None else (box[2] - box[0]) * (box[3] - box[1])


def canvas_is_drawn(page, selector: str) -> bool:
    """True when a visible canvas matching ``selector`` has non-blank pixels."""
    return bool(page.evaluate(
        """(sel) => {
            for (const c of document.querySelectorAll(sel)) {
                if (c.offsetParent === null || !c.width || !c.height) continue;
                const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
                for (let i = 0; i < d.length; i += 4 * 97) {
                    if (d[i + 3] !== 0 && (d[i] < 250 || d[i + 1] < 250 || d[i + 2] < 250)) return true;
                }
            }
            return false;
        }""",
        selector,
    ))
