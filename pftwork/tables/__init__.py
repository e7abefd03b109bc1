"""Package data: pftwork's compact GLI coefficient and spline tables, one JSON file per set.

The files are written by ``scripts/build_tables.py`` from published figures (provenance,
citation, DOI and source checksums in each file's ``header``). This module is the only place
that reads them; :mod:`pftwork.reference` asks it for a parsed, checksum-verified table.
"""

from __future__ import annotations

import hashlib
import json
from functools import cache
from importlib import resources
from typing import Any

from pftwork.errors import PftworkError

__all__ = ["TABLE_FORMAT", "content_sha256", "load_table", "table_ids"]

TABLE_FORMAT = "pftwork-gli-table/1"
_IDS = ("gli-global-2022", "gli-2012", "gli-2017", "gli-2021")


def table_ids() -> tuple[str, ...]:
    """Identifiers of the bundled tables, in pftwork's preferred order."""
    return _IDS


def content_sha256(content: dict[str, Any]) -> str:
    """Sha256 of the canonical JSON of a table's ``content`` (sorted keys, no spaces, UTF-8)."""
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@cache
def load_table(set_id: str) -> dict[str, Any]:
    """Parsed table of one equation set, its content checksum verified against its header.

    Raises
    ------
    KeyError
        If no table of that identifier is bundled.
    PftworkError
        If the file's content does not match the checksum recorded in its header.
    """
    if set_id not in _IDS:
        raise KeyError(set_id)
    text = (resources.files(__name__) / f"{set_id}.json").read_text(encoding="utf-8")
    document = json.loads(text)
    if document.get("format") != TABLE_FORMAT:
        raise PftworkError(f"table {set_id}: format {document.get('format')!r}, expected {TABLE_FORMAT!r}")
    recorded = document["header"]["content_sha256"]
    actual = content_sha256(document["content"])
    if actual != recorded:
        raise PftworkError(
            f"table {set_id}: content sha256 {actual} does not match the recorded {recorded}; "
            "rebuild it with scripts/build_tables.py"
        )
    return document
