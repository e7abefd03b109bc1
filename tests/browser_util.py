"""Helpers for the real-browser tests: Voila and JupyterLab servers in their own process groups.

Voila has no status endpoint, so readiness is the TCP port accepting connections; requesting
``/`` then executes the notebook. JupyterLab is ready when its authenticated ``/api/status``
answers. Each server runs in a new session (process group) so that stopping it also stops the
kernels it started.
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Iterator, Mapping
from pathlib import Path

__all__ = ["CHROMIUM", "CHROMIUM_ARGS", "LabServer", "free_port", "lab_server",
           "missing_browser_tools", "missing_lab_tools", "voila_server"]

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


def missing_lab_tools() -> str | None:
    """Why the JupyterLab browser test cannot run here (``None`` when everything is present)."""
    if not Path(CHROMIUM).exists():
        return f"{CHROMIUM} not found (apt-get install chromium)"
    for module, extra in (("playwright", "browser"), ("jupyterlab", "lab")):
        try:
            __import__(module)
        except ImportError:
            return f"Python package {module!r} not installed (pip install pftwork[{extra}])"
    return None


class LabServer:
    """A running JupyterLab: ``url`` (ends with ``/``), ``token`` and the server process."""

    def __init__(self, url: str, token: str, proc: subprocess.Popen) -> None:
        self.url, self.token, self.proc = url, token, proc

    def page(self, path: str) -> str:
        """Browser URL of ``path`` under the server (``lab/tree/x.ipynb``), token included."""
        return f"{self.url}{path}?token={self.token}"


#: Server-side settings that keep JupyterLab offline: no announcements feed, no update check,
#: no PyPI-backed extension manager (jupyterlab 4.6, ``LabApp`` traits).
_LAB_SERVER_CONFIG = {"LabApp": {"news_url": None,
                                 "check_for_updates_class": "jupyterlab.NeverCheckForUpdate",
                                 "extension_manager": "readonly"}}
#: Front-end setting that stops the news/update notification (toolchain.md).
_LAB_NOTIFICATION_SETTINGS = {"fetchNews": "false", "checkForUpdates": False}


def _lab_dirs(home: Path) -> dict[str, str]:
    """Fresh Jupyter config/runtime/workspace/settings folders under ``home`` (as env vars)."""
    dirs = {"JUPYTER_CONFIG_DIR": home / "config", "JUPYTER_RUNTIME_DIR": home / "runtime",
            "JUPYTERLAB_WORKSPACES_DIR": home / "workspaces",
            "JUPYTERLAB_SETTINGS_DIR": home / "settings"}
    for folder in dirs.values():
        folder.mkdir(parents=True, exist_ok=True)
    (dirs["JUPYTER_CONFIG_DIR"] / "jupyter_server_config.json").write_text(
        json.dumps(_LAB_SERVER_CONFIG, indent=1), encoding="utf-8")
    notification = (dirs["JUPYTERLAB_SETTINGS_DIR"] / "@jupyterlab" / "apputils-extension"
                    / "notification.jupyterlab-settings")
    notification.parent.mkdir(parents=True, exist_ok=True)
    notification.write_text(json.dumps(_LAB_NOTIFICATION_SETTINGS), encoding="utf-8")
    return {name: str(folder) for name, folder in dirs.items()}


def _wait_for_status(url: str, token: str, proc: subprocess.Popen, timeout: float) -> None:
    """Poll the authenticated ``api/status`` until it answers 200 (or the server dies)."""
    deadline = time.monotonic() + timeout
    request = urllib.request.Request(f"{url}api/status",
                                     headers={"Authorization": f"token {token}"})
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"jupyter lab exited early with code {proc.returncode}")
        with contextlib.suppress(OSError, urllib.error.URLError), \
                urllib.request.urlopen(request, timeout=2) as response:
            if response.status == 200:
                return
        time.sleep(0.3)
    raise TimeoutError(f"jupyter lab did not answer {url}api/status within {timeout:.0f} s")


@contextlib.contextmanager
def lab_server(root: Path, home: Path, log_path: Path, env: Mapping[str, str] | None = None,
               timeout: float = 90.0) -> Iterator[LabServer]:
    """Run ``jupyter lab`` on 127.0.0.1 serving ``root`` and yield it; always stop it.

    Parameters
    ----------
    root : Path
        The server's root folder (and working directory).
    home : Path
        Where the temporary Jupyter config, runtime, workspace and settings folders go.
    log_path : Path
        Where the server's output goes (read it when a test fails).
    env : mapping, optional
        Extra environment variables for the server and its kernels.
    timeout : float
        Seconds to wait for the server to answer.
    """
    port, token = free_port(), secrets.token_hex(16)
    jupyter = shutil.which("jupyter", path=str(Path(sys.executable).parent)) or "jupyter"
    cmd = [jupyter, "lab", "--no-browser", "--allow-root", "--ServerApp.ip=127.0.0.1",
           f"--ServerApp.port={port}", "--ServerApp.port_retries=0",
           f"--ServerApp.root_dir={root}", f"--IdentityProvider.token={token}",
           "--LabApp.expose_app_in_browser=True"]
    full_env = {**os.environ, **_lab_dirs(home), **(env or {})}
    url = f"http://127.0.0.1:{port}/"
    with open(log_path, "w", encoding="utf-8") as log:
        proc = subprocess.Popen(cmd, cwd=root, stdout=log, stderr=subprocess.STDOUT,
                                env=full_env, start_new_session=True)
        try:
            _wait_for_status(url, token, proc, timeout)
            yield LabServer(url, token, proc)
        finally:
            _stop(proc)


def skip_or_fail_without(why: str | None) -> None:
    """Skip when a browser tool is missing (``why``), but fail when PFTWORK_REQUIRE_BROWSER=1 (CI)."""
    import pytest

    if why and os.environ.get("PFTWORK_REQUIRE_BROWSER") == "1":
        pytest.fail(f"browser test required (PFTWORK_REQUIRE_BROWSER=1) but {why}")
    if why:
        pytest.skip(why)
