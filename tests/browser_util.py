"""Helpers for the real-browser tests: a Voila server in its own process group, chromium flags.

Voila has no status endpoint, so readiness is the TCP port accepting connections; requesting
``/`` then executes the notebook. The server runs in a new session (process group) so that
stopping it also stops the kernel it started.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator, Mapping
from pathlib import Path

__all__ = ["CHROMIUM", "CHROMIUM_ARGS", "free_port", "missing_browser_tools", "voila_server"]

CHROMIUM = "/usr/bin/chromium"
#: Flags for Debian's chromium in a headless container (toolchain.md).
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--disable-background-networking", "--disable-component-update",
                 "--no-first-run", "--disable-sync"]


def missing_browser_tools() -> str | None:
    """Why the browser test cannot run here (``None`` when chromium, playwright, voila exist)."""
    if not Path(CHROMIUM).exists():
        return f"{CHROMIUM} not found (apt-get install chromium)"
    for module in ("playwright", "voila"):
        try:
            __import__(module)
        except ImportError:
            return f"Python package {module!r} not installed (pip install pftwork[browser])"
    return None


def free_port() -> int:
    """A TCP port on 127.0.0.1 that is free right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait_for_port(port: int, proc: subprocess.Popen, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"voila exited early with code {proc.returncode}")
        with contextlib.suppress(OSError), socket.create_connection(("127.0.0.1", port), 0.5):
            return
        time.sleep(0.2)
    raise TimeoutError(f"voila did not open port {port} within {timeout:.0f} s")


@contextlib.contextmanager
def voila_server(notebook: Path, log_path: Path, env: Mapping[str, str] | None = None,
                 timeout: float = 60.0) -> Iterator[str]:
    """Serve ``notebook`` with Voila on 127.0.0.1 and yield its URL; always stop it.

    Parameters
    ----------
    notebook : Path
        The notebook to serve (its folder is the kernel's working directory).
    log_path : Path
        Where Voila's output goes (read it when a test fails).
    env : mapping, optional
        Extra environment variables for the server and its kernel.
    """
    port = free_port()
    voila = shutil.which("voila", path=str(Path(sys.executable).parent)) or "voila"
    cmd = [voila, notebook.name, "--no-browser", f"--port={port}", "--Voila.ip=127.0.0.1"]
    with open(log_path, "w", encoding="utf-8") as log:
        proc = subprocess.Popen(cmd, cwd=notebook.parent, stdout=log, stderr=subprocess.STDOUT,
                                env={**os.environ, **(env or {})}, start_new_session=True)
        try:
            _wait_for_port(port, proc, timeout)
            yield f"http://127.0.0.1:{port}/"
        finally:
            _stop(proc)


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is not None:
        return
    with contextlib.suppress(ProcessLookupError):
        os.killpg(proc.pid, signal.SIGTERM)
    try:
        proc.wait(timeout=15)
    except subprocess.TimeoutExpired:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=5)
