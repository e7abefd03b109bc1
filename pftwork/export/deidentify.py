"""De-identification of a worksheet record for sharing (case conference, teaching, audit).

What :func:`deidentify_record` does to a worksheet record (``WorksheetRecord.to_dict()`` form):

* **Direct identifiers** of the subject are removed: ``name``, ``record_number`` and
  ``birth_date`` become ``null``; ``subject.id`` becomes a pseudonym ``anon-<10 hex>`` derived
  with HMAC-SHA-256 from the id and a key. With no key (the default) the key is random for each
  export, so the pseudonym links nothing; a site that needs stable pseudonyms passes its own
  secret key (``PFTWORK_PSEUDONYM_KEY`` in :func:`pftwork.export.notebook.export_notebook`).
  A plain unkeyed hash of a record number would be reversible by trying every number.
* **Free text** (the clinical question, operator comments, amendment reasons and conclusions,
  notes, decision history, event log, any other string of the case) loses every occurrence of
  the subject's name (and each part of it), record number, id, birth date and of every text the
  reviewer marked with ``WorksheetRecord.mark_identifier``; dates written in the text are
  replaced by their offset from the test date (``[day -14]``) or by ``[date removed]``.
* **Dates**: the case format needs ISO dates for computation (intervals between tests), so
  every date and time stamp is moved by the same number of days so that the test date becomes
  the obviously synthetic ``2000-01-01`` (day 0); intervals, and therefore every computation,
  are unchanged. Notebooks and HTML show dates as offsets (``day 0``, ``day -365``).
* **Age 90 and over** is recorded as exactly 90 and shown as "90 or older"; reference values
  are then *computed at age 90* (documented in the export). Ages of earlier tests are derived
  from the re-based dates so that they cannot reveal the true age. The embedded case is the
  de-identified one, so the exported notebook still re-verifies.

The interpretation is recomputed from the de-identified case by the caller (see
:mod:`pftwork.export.notebook`), so every engine value in the export matches what verification
recomputes. Rules follow the HIPAA Privacy Rule Safe Harbor list, 45 CFR 164.514(b)(2)(i)
(names, dates except year, ages over 89, record numbers, other unique numbers), applied more
strictly for dates (the year is not kept either). pftwork cannot know every identifier a
reviewer types: marking them is the reviewer's job, and the export says so.

Pure functions; no I/O.
"""

from __future__ import annotations

import copy
import datetime as dt
import hashlib
import hmac
import os
import re
from collections.abc import Iterable, Mapping
from typing import Any

__all__ = [
    "AGE_CAP",
    "EPOCH",
    "REMOVED",
    "date_offset_text",
    "deidentify_record",
    "identifiers_of",
    "pseudonym",
    "scrub_text",
]

#: Ages at or above this are recorded as this value and shown as "90 or older" (45 CFR 164.514).
AGE_CAP = 90.0
#: The synthetic date that the test date is moved to (day 0).
EPOCH = dt.date(2000, 1, 1)
#: What replaces an identifier in free text.
REMOVED = "[removed]"

_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
_ISO_TIME = re.compile(r"^(\d{4}-\d{2}-\d{2})([T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?)(Z|[+-]\d{2}:?\d{2})?$")
_DATE_IN_TEXT = re.compile(r"(?<!\d)(\d{4})-(\d{2})-(\d{2})(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?(?!\d)")
_NUMERIC_DATE = re.compile(r"(?<!\d)\d{1,2}[./-]\d{1,2}[./-](?:\d{4}|\d{2})(?!\d)")
_MONTHS = ("jan|feb|mar|apr|may|jun|jul|aug|sep|sept|oct|nov|dec|january|february|march|april|"
           "june|july|august|september|october|november|december")
_WORD_DATE = re.compile(rf"(?i)\b(?:\d{{1,2}}(?:st|nd|rd|th)?\s+(?:{_MONTHS})\.?,?\s+\d{{4}}|"
                        rf"(?:{_MONTHS})\.?\s+\d{{1,2}}(?:st|nd|rd|th)?,?\s+\d{{4}})\b")


def pseudonym(subject_id: str, key: bytes) -> str:
    """Pseudonym ``anon-<10 hex>`` of ``subject_id`` under ``key`` (HMAC-SHA-256).

    Examples
    --------
    >>> pseudonym("clinic-A-0192", b"site secret")
    'anon-c339549d9d'
    """
    mac = hmac.new(key, subject_id.encode("utf-8"), hashlib.sha256).hexdigest()
    return f"anon-{mac[:10]}"


def _parse_date(text: Any) -> dt.date | None:
    if isinstance(text, str) and _ISO_DATE.match(text):
        try:
            return dt.date.fromisoformat(text)
        except ValueError:
            return None
    return None


def date_offset_text(days: int) -> str:
    """``"day 0"``, ``"day -365"``, ``"day +2"``: a date shown as its offset from the test."""
    return "day 0" if days == 0 else f"day {days:+d}"


def identifiers_of(record: Mapping[str, Any]) -> list[str]:
    """The texts to remove from free text: subject identifiers and the reviewer's marks.

    Includes the full name and each part of it of two characters or more, the record number,
    the subject id, the birth date (ISO and the usual day/month/year spellings) and every
    marked identifier; longest first so that a full name goes before its parts.
    """
    subject = (record.get("case_raw") or {}).get("subject") or {}
    found: set[str] = set()
    name = subject.get("name")
    if isinstance(name, str) and name.strip():
        found.add(name.strip())
        found.update(p for p in re.split(r"[\s,]+", name) if len(p.strip(".-'")) >= 2)
    for key in ("record_number", "id"):
        if isinstance(subject.get(key), str) and subject[key].strip():
            found.add(subject[key].strip())
    birth = _parse_date(subject.get("birth_date"))
    if birth is not None:
        y, m, d = birth.year, birth.month, birth.day
        found.update({birth.isoformat(), f"{d:02d}/{m:02d}/{y}", f"{m:02d}/{d:02d}/{y}",
                      f"{d}/{m}/{y}", f"{m}/{d}/{y}", f"{d:02d}.{m:02d}.{y}", f"{d}.{m}.{y}",
                      f"{d:02d}-{m:02d}-{y}", f"{y}{m:02d}{d:02d}"})
    found.update(t.strip() for t in record.get("marked_identifiers") or [] if isinstance(t, str)
                 and t.strip())
    return sorted(found, key=lambda t: (-len(t), t))


def _identifier_pattern(identifiers: Iterable[str]) -> re.Pattern[str] | None:
    parts = [re.escape(t) for t in identifiers if t]
    if not parts:
        return None
    return re.compile(r"(?<![0-9A-Za-z])(?:" + "|".join(parts) + r")(?![0-9A-Za-z])",
                      re.IGNORECASE)


def scrub_text(text: str, identifiers: Iterable[str], anchor: dt.date | None) -> str:
    """``text`` without identifiers and with dates replaced by offsets.

    Parameters
    ----------
    text : str
        Free text written by a person (note, reason, question …).
    identifiers : iterable of str
        Texts to remove (case-insensitive, whole words), see :func:`identifiers_of`.
    anchor : datetime.date or None
        The test date; ISO dates in the text become ``[day N]`` relative to it.

    Examples
    --------
    >>> scrub_text("Seen by Dr X on 2026-10-01 with Ann Example", ["Ann Example"],
    ...            dt.date(2026, 10, 14))
    'Seen by Dr X on [day -13] with [removed]'
    """
    pattern = _identifier_pattern(identifiers)
    if pattern is not None:
        text = pattern.sub(REMOVED, text)

    def _iso(match: re.Match[str]) -> str:
        try:
            day = dt.date(int(match.group(1)), int(match.group(2)), int(match.group(3)))
        except ValueError:
            return "[date removed]"
        if anchor is None:
            return "[date removed]"
        return f"[{date_offset_text((day - anchor).days)}]"

    text = _DATE_IN_TEXT.sub(_iso, text)
    text = _NUMERIC_DATE.sub("[date removed]", text)
    return _WORD_DATE.sub("[date removed]", text)


def _shift(text: str, delta: dt.timedelta) -> str | None:
    """An ISO date or time stamp moved by ``delta``; ``None`` if ``text`` is neither."""
    if _ISO_DATE.match(text):
        day = _parse_date(text)
        return None if day is None else (day + delta).isoformat()
    m = _ISO_TIME.match(text)
    if not m:
        return None
    try:
        day = dt.date.fromisoformat(m.group(1))
    except ValueError:
        return None
    return (day + delta).isoformat() + m.group(2) + (m.group(3) or "")


def _walk(obj: Any, fix: Any) -> Any:
    if isinstance(obj, str):
        return fix(obj)
    if isinstance(obj, Mapping):
        return {k: _walk(v, fix) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_walk(v, fix) for v in obj]
    return obj


def _anchor(record: Mapping[str, Any]) -> dt.date | None:
    test = (record.get("case_raw") or {}).get("test") or {}
    day = _parse_date(test.get("date"))
    if day is None:
        created = record.get("created_utc")
        day = _parse_date(created[:10]) if isinstance(created, str) else None
    return day


def _subject(subject: Mapping[str, Any], key: bytes, info: dict[str, Any]) -> dict[str, Any]:
    out = dict(subject)
    for field in ("name", "record_number", "birth_date"):
        if out.get(field) is not None:
            out[field] = None
            info["removed"].append(f"subject.{field}")
    out["id"] = pseudonym(str(subject.get("id") or ""), key)
    info["removed"].append("subject.id (replaced by a pseudonym)")
    age = out.get("age_years")
    if isinstance(age, (int, float)) and not isinstance(age, bool) and age >= AGE_CAP:
        out["age_years"] = AGE_CAP
        info["age_capped"] = True
    return out


def deidentify_record(record: Mapping[str, Any], *, key: bytes | None = None
                      ) -> tuple[dict[str, Any], dict[str, Any]]:
    """A de-identified copy of a worksheet record (``WorksheetRecord.to_dict()`` form).

    Parameters
    ----------
    record : dict
        ``format: "pftwork-worksheet/1"`` dictionary; not modified.
    key : bytes, optional
        Pseudonym key (see module docstring); random when omitted.

    Returns
    -------
    (dict, dict)
        The de-identified record, whose ``interpretation`` and step ``engine`` parts are still
        the *original* ones (the caller recomputes them from the new ``case_raw``), and an
        ``info`` dictionary describing what was done (``removed``, ``age_capped``,
        ``date_offset_days``, ``marked_identifiers`` count, ``anchor_shown_as``).
    """
    key = key if key is not None else os.urandom(32)
    identifiers = identifiers_of(record)
    anchor = _anchor(record)
    delta = (EPOCH - anchor) if anchor is not None else dt.timedelta(0)
    info: dict[str, Any] = {"method": "pftwork de-identification/1", "removed": [],
                            "age_capped": False, "dates": "re-based: the test date is "
                            "written 2000-01-01 (day 0); intervals are kept",
                            "marked_identifiers": len(record.get("marked_identifiers") or [])}

    def fix(text: str) -> str:
        shifted = _shift(text, delta) if anchor is not None else None
        return shifted if shifted is not None else scrub_text(text, identifiers, anchor)

    out = copy.deepcopy(dict(record))
    case = copy.deepcopy(dict(out.get("case_raw") or {}))
    subject = _subject(case.get("subject") or {}, key, info)
    rest = _walk({k: v for k, v in case.items() if k != "subject"}, fix)
    subject = {k: (_walk(v, fix) if k not in ("id",) else v) for k, v in subject.items()}
    case = {"subject": subject, **rest}
    if info["age_capped"]:
        for entry in case.get("history") or []:
            if isinstance(entry, dict) and isinstance(entry.get("subject"), dict):
                entry["subject"].pop("age_years", None)
        info["removed"].append("age over 89 (recorded as 90; earlier ages derived from dates)")
    if anchor is None:
        info["dates"] = "no test date: dates in free text removed"
    out["case_raw"] = case
    for part in ("steps", "events", "signoff", "created_utc", "updated_utc"):
        if part == "steps":
            out["steps"] = [{**s, **{k: _walk(s.get(k), fix) for k in ("decision", "notes",
                                                                      "history")}}
                            for s in out.get("steps") or []]
        else:
            out[part] = _walk(out.get(part), fix)
    out["marked_identifiers"] = []
    return out, info
