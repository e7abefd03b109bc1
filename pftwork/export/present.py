"""Read-only, de-identified case-conference page: ``pftwork present SOURCE``.

The page is the de-identified static HTML of :mod:`pftwork.export.html`, rendered once and
served from memory by :mod:`http.server` on the loopback interface. Only ``GET``/``HEAD`` of
``/`` are answered; every other path is 404 and every other method 405, so nothing can be
changed through the page. Responses carry a strict Content-Security-Policy (no script, no
external resource), ``Cache-Control: no-store`` and ``X-Frame-Options: DENY``.
"""

from __future__ import annotations

import ipaddress
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

from pftwork.errors import NotebookError

from .document import worksheet_from_export
from .html import render_html

__all__ = ["PresentServer", "load_source", "present", "serve"]

_HEADERS = {
    "Content-Type": "text/html; charset=utf-8",
    "Content-Security-Policy": "default-src 'none'; style-src 'unsafe-inline'; "
                               "frame-ancestors 'none'",
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}


def load_source(source: Any) -> Any:
    """A worksheet record (object or dict) from a case, an autosave, a notebook or a record.

    Parameters
    ----------
    source : WorksheetRecord, dict, Case or path
        A case file (``pftwork-case/1``: interpreted automatically, decisions pending), a
        worksheet autosave (``*.pftwork.json``), an exported notebook (``.ipynb``) or an
        object already in memory.
    """
    from pftwork.case_model import Case
    from pftwork.worksheet.record import WorksheetRecord

    if isinstance(source, (WorksheetRecord, Case)):
        return source if isinstance(source, WorksheetRecord) else WorksheetRecord.from_case(source)
    if isinstance(source, dict):
        if source.get("format") == WorksheetRecord.FORMAT:
            return source
        return WorksheetRecord.from_case(source)
    path = Path(source)
    if path.suffix == ".ipynb":
        from .notebook import read_notebook

        export = read_notebook(path).metadata.get("pftwork", {}).get("record")
        if not isinstance(export, dict):
            raise NotebookError(f"{path}: not a pftwork worksheet notebook")
        return worksheet_from_export(export)
    if path.name.endswith(".pftwork.json"):
        from pftwork.worksheet.storage import load_record

        return load_record(path)
    from pftwork.case import read_case_file

    data = read_case_file(path)
    if data.get("format") == WorksheetRecord.FORMAT:
        return data
    return WorksheetRecord.from_case(data)


class _Handler(BaseHTTPRequestHandler):
    page: bytes = b""
    server_version = "pftwork-present"
    sys_version = ""

    def _send(self, code: int, body: bytes, extra: dict[str, str] | None = None) -> None:
        self.send_response(code)
        for k, v in {**_HEADERS, **(extra or {})}.items():
            self.send_header(k, v)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def do_GET(self) -> None:
        if self.path.split("?", 1)[0] in ("/", "/index.html"):
            self._send(200, self.page)
        else:
            self._send(404, b"<!DOCTYPE html><title>404</title><p>Not found.</p>")

    do_HEAD = do_GET

    def _refuse(self) -> None:
        self._send(405, b"<!DOCTYPE html><title>405</title><p>This page is read-only.</p>",
                   {"Allow": "GET, HEAD"})

    do_POST = do_PUT = do_DELETE = do_PATCH = do_OPTIONS = _refuse

    def log_message(self, format: str, *args: Any) -> None:
        """Silent: a case conference does not need an access log on the console."""


class PresentServer:
    """A running presentation server (in a background thread); stop it with :meth:`shutdown`."""

    def __init__(self, page: str, host: str, port: int) -> None:
        handler = type("PresentHandler", (_Handler,), {"page": page.encode("utf-8")})
        self._httpd = ThreadingHTTPServer((host, port), handler)
        self._httpd.daemon_threads = True
        self._thread = threading.Thread(target=self._httpd.serve_forever, daemon=True,
                                        name="pftwork-present")
        self._thread.start()

    @property
    def url(self) -> str:
        """``http://host:port/`` of the page."""
        host, port = self._httpd.server_address[:2]
        return f"http://{host}:{port}/"

    def wait(self) -> None:
        """Block until interrupted (Ctrl-C), then shut down."""
        try:
            while self._thread.is_alive():
                self._thread.join(0.5)
        except KeyboardInterrupt:
            pass
        finally:
            self.shutdown()

    def shutdown(self) -> None:
        """Stop serving and close the socket."""
        self._httpd.shutdown()
        self._httpd.server_close()

    def __enter__(self) -> PresentServer:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.shutdown()


def _loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def serve(record_or_case: Any, host: str = "127.0.0.1", port: int = 0, *,
          allow_remote: bool = False) -> PresentServer:
    """Serve the de-identified page of a worksheet (or case) and return the running server.

    Parameters
    ----------
    record_or_case : WorksheetRecord, dict, Case or path
        See :func:`load_source`.
    host : str
        Interface; loopback only unless ``allow_remote``.
    port : int
        0 picks a free port (see ``server.url``).

    Raises
    ------
    ValueError
        For a non-loopback ``host`` without ``allow_remote=True``.
    """
    if not allow_remote and not _loopback(host):
        raise ValueError(f"host = {host!r}: expected a loopback address (127.0.0.1); the page "
                         "is meant for the presenting machine only")
    page = render_html(load_source(record_or_case), deidentify=True)
    return PresentServer(page, host, port)


def present(source: Any, *, port: int = 8765, once: bool = False,
            host: str = "127.0.0.1") -> int:
    """Command-line entry: serve until Ctrl-C, or with ``once`` write the page and exit.

    Returns
    -------
    int
        Exit code 0.
    """
    if once:
        out = Path.cwd() / "pftwork-present.html"
        out.write_text(render_html(load_source(source), deidentify=True), encoding="utf-8")
        print(f"wrote {out} (de-identified)")
        return 0
    server = serve(source, host=host, port=port)
    print(f"serving the de-identified worksheet at {server.url} (read-only); Ctrl-C to stop")
    server.wait()
    return 0
