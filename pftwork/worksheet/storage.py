"""Atomic saving and loading of worksheet records (``*.pftwork.json``).

A save writes a temporary file in the target's own folder, flushes and fsyncs it, keeps the
current good copy as ``<name>.bak`` and moves the new file into place with :func:`os.replace`
(atomic on POSIX and Windows). The target therefore always holds either the previous or the
new complete record: a kernel killed mid-save loses at most the edit being saved.

The autosave of a case lives beside the notebook (the current working directory of a Jupyter
kernel) as ``<case id>.pftwork.json``; the environment variable ``PFTWORK_AUTOSAVE_DIR``
redirects it (used by tests and kiosks).
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Any

from pftwork.errors import WorksheetError

from .record import WorksheetRecord

__all__ = ["AUTOSAVE_SUFFIX", "autosave_path", "backup_path", "load_record", "save_record"]

#: File name ending of worksheet autosaves.
AUTOSAVE_SUFFIX = ".pftwork.json"
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")


def _current_umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


_UMASK = _current_umask()


def autosave_path(case_id: str, folder: str | Path | None = None) -> Path:
    """Where the autosave of case ``case_id`` lives.

    Parameters
    ----------
    case_id : str
        Subject id of the case; characters unsafe in file names become ``_``.
    folder : path, optional
        Defaults to ``$PFTWORK_AUTOSAVE_DIR`` if set, else the current working directory
        (beside the notebook).
    """
    base = Path(folder) if folder is not None else Path(
        os.environ.get("PFTWORK_AUTOSAVE_DIR") or Path.cwd())
    stem = _UNSAFE.sub("_", case_id).strip("._") or "case"
    return base / f"{stem}{AUTOSAVE_SUFFIX}"


def backup_path(path: str | Path) -> Path:
    """The ``.bak`` copy kept beside ``path`` (the previous good save)."""
    path = Path(path)
    return path.with_name(path.name + ".bak")


def save_record(record: WorksheetRecord, path: str | Path) -> Path:
    """Write ``record`` to ``path`` atomically; the previous good copy becomes ``.bak``.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    WorksheetError
        When the folder is not writable (the previous file is left untouched).
    """
    path = Path(path)
    body = record.to_dict(copy_data=False)
    del body["case_raw"]  # appended from the record's cached text (raw curves can be large)
    text = (json.dumps(body, ensure_ascii=False, separators=(",", ":"))[:-1]
            + ',"case_raw":' + record.case_raw_json() + "}")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = _write_temp(path, text)
        try:
            if _is_good(path):
                _keep_backup(path)
            os.replace(tmp, path)
            _remember(path)
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            raise
        _fsync_dir(path.parent)
    except OSError as exc:
        raise WorksheetError(f"Could not save the worksheet to {path}: {exc.strerror or exc}"
                             ) from None
    return path


def load_record(path: str | Path) -> WorksheetRecord:
    """Read a record written by :func:`save_record`.

    Raises
    ------
    WorksheetError
        When the file is missing, unreadable, not JSON or not a ``pftwork-worksheet/1``
        record; the message names the file and, if one exists, the ``.bak`` good copy.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise WorksheetError(f"Cannot read worksheet autosave {path}: {exc.strerror or exc}"
                             + _bak_hint(path)) from None
    except UnicodeDecodeError as exc:
        raise WorksheetError(f"Worksheet autosave {path} is corrupt (not UTF-8 text: byte "
                             f"{exc.start}); it was left as it is." + _bak_hint(path)) from None
    try:
        data: Any = json.loads(text)
    except json.JSONDecodeError as exc:
        raise WorksheetError(f"Worksheet autosave {path} is corrupt (not JSON: {exc.msg} at "
                             f"line {exc.lineno}); it was left as it is." + _bak_hint(path)
                             ) from None
    except (ValueError, RecursionError) as exc:  # a number too long to read; nesting too deep
        raise WorksheetError(f"Worksheet autosave {path} is corrupt (not ordinary JSON: "
                             f"{str(exc)[:120]}); it was left as it is." + _bak_hint(path)
                             ) from None
    try:
        return WorksheetRecord.from_dict(data)
    except WorksheetError as exc:
        raise WorksheetError(f"Worksheet autosave {path} is not a valid worksheet record: {exc}."
                             + _bak_hint(path)) from None


def _write_temp(path: Path, text: str) -> str:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with contextlib.suppress(OSError):  # mkstemp creates 0600; keep the usual file mode
            os.chmod(tmp, path.stat().st_mode & 0o777 if path.exists() else 0o666 & ~_UMASK)
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return tmp


#: (size, mtime_ns) of the files this process wrote completely, by absolute path.
_WRITTEN: dict[str, tuple[int, int]] = {}


def _signature(path: Path) -> tuple[int, int] | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return st.st_size, st.st_mtime_ns


def _remember(path: Path) -> None:
    sig = _signature(path)
    if sig is not None:
        _WRITTEN[str(path.resolve())] = sig


def _is_good(path: Path) -> bool:
    """``True`` when ``path`` holds a parseable worksheet record (worth keeping as .bak).

    A file this process wrote itself and that is unchanged since (same size and mtime) is
    known to be good without parsing it again.
    """
    sig = _signature(path)
    if sig is None:
        return False
    if _WRITTEN.get(str(path.resolve())) == sig:
        return True
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("format") == WorksheetRecord.FORMAT


def _keep_backup(path: Path) -> None:
    """Make ``.bak`` a copy of the current file, atomically (hard link, else copy)."""
    bak = backup_path(path)
    staging = bak.with_name(bak.name + f".{os.getpid()}.tmp")
    with contextlib.suppress(FileNotFoundError):
        os.unlink(staging)
    try:
        os.link(path, staging)
    except OSError:
        shutil.copyfile(path, staging)
    os.replace(staging, bak)


def _fsync_dir(folder: Path) -> None:
    if os.name != "posix":
        return
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _bak_hint(path: Path) -> str:
    bak = backup_path(path)
    if bak.exists():
        return f" The previous good copy is {bak} (open it with Worksheet.resume({str(bak)!r}))."
    return ""
