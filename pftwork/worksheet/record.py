"""The reviewer's worksheet as plain state: engine findings, decisions, notes and sign-off.

A :class:`WorksheetRecord` holds one case (its raw dictionary), the interpretation document
(``format: "pftwork-interpretation/1"``) and one :class:`StepRecord` per interpretation step.
The reviewer accepts a step, amends it (the engine's wording stays on record beside the
amendment, and a reason is mandatory) or adds notes; once every step is reviewed the worksheet
can be signed off by a named reviewer. Nothing is ever erased: a superseded decision moves to
its step's ``history`` and every action is appended to the record's ``events`` log.

Pure state: no widgets, no file I/O (see :mod:`pftwork.worksheet.storage`). The clock is
injectable (``now``) so that tests can freeze it. ``to_dict()`` is JSON-safe and
``from_dict(to_dict())`` restores an equal record.
"""

from __future__ import annotations

import copy
import datetime as _dt
import hashlib
import json
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

from pftwork.errors import WorksheetError

__all__ = [
    "DECISION_STATUSES",
    "Decision",
    "Note",
    "StepRecord",
    "WorksheetRecord",
    "utc_stamp",
]

#: Possible values of :attr:`Decision.status`.
DECISION_STATUSES = ("pending", "accepted", "amended")
_REVIEWED = ("accepted", "amended")

Clock = Callable[[], "_dt.datetime | str"]


def utc_stamp(now: Clock | None = None) -> str:
    """ISO-8601 UTC time stamp to the second, e.g. ``"2026-12-01T10:00:00Z"``.

    Parameters
    ----------
    now : callable, optional
        Returns a :class:`datetime.datetime` (naive values are taken as UTC) or a ready
        ISO string. Defaults to the system clock.
    """
    value = now() if now is not None else _dt.datetime.now(_dt.timezone.utc)
    if isinstance(value, str):
        return value
    if value.tzinfo is None:
        value = value.replace(tzinfo=_dt.timezone.utc)
    return value.astimezone(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


@dataclass
class Decision:
    """The reviewer's decision on one step.

    Attributes
    ----------
    status : str
        ``"pending"``, ``"accepted"`` or ``"amended"``.
    conclusion : str or None
        The amended wording (the engine's own wording stays in :attr:`StepRecord.engine`).
    reason : str or None
        Why the engine's conclusion was amended (mandatory for ``"amended"``).
    reviewer : str or None
        Who decided.
    time_utc : str or None
        When, ISO-8601 UTC.
    """

    status: str = "pending"
    conclusion: str | None = None
    reason: str | None = None
    reviewer: str | None = None
    time_utc: str | None = None

    @property
    def reviewed(self) -> bool:
        """``True`` once the step is accepted or amended."""
        return self.status in _REVIEWED


@dataclass
class Note:
    """A free-text note attached to a step."""

    text: str
    author: str | None
    time_utc: str


@dataclass
class StepRecord:
    """One interpretation step under review.

    Attributes
    ----------
    id : str
        Step identifier (``"validity"``, ``"airflow"`` …).
    engine : dict
        The engine's finding (``Finding.to_dict()``), never edited by the reviewer.
    decision : Decision
        The current decision.
    notes : list of Note
        Notes in the order written.
    history : list of dict
        Earlier decisions (``Decision`` fields plus ``superseded_utc`` and ``why``), oldest
        first; never erased.
    """

    id: str
    engine: dict[str, Any]
    decision: Decision = field(default_factory=Decision)
    notes: list[Note] = field(default_factory=list)
    history: list[dict[str, Any]] = field(default_factory=list)

    @property
    def title(self) -> str:
        """The engine's heading of the step (its id when absent)."""
        return str(self.engine.get("title") or self.id)

    @property
    def conclusion(self) -> str:
        """The conclusion in force: the amended wording, else the engine's."""
        if self.decision.status == "amended" and self.decision.conclusion:
            return self.decision.conclusion
        return str(self.engine.get("conclusion", ""))

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary."""
        return {"id": self.id, "engine": copy.deepcopy(self.engine),
                "decision": asdict(self.decision), "notes": [asdict(n) for n in self.notes],
                "history": copy.deepcopy(self.history)}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> StepRecord:
        """Inverse of :meth:`to_dict`."""
        decision = Decision(**d.get("decision", {}))
        if decision.status not in DECISION_STATUSES:
            raise WorksheetError(f"steps[{d.get('id')}].decision.status = {decision.status!r}: "
                                 f"expected one of {', '.join(DECISION_STATUSES)}")
        return cls(id=str(d["id"]), engine=dict(d["engine"]), decision=decision,
                   notes=[Note(**n) for n in d.get("notes", [])],
                   history=[dict(h) for h in d.get("history", [])])


class WorksheetRecord:
    """A case, its interpretation and the reviewer's decisions (``format: "pftwork-worksheet/1"``).

    Build one with :meth:`from_case` (validates and interprets) or :meth:`from_dict` (restores
    a saved record). Every mutating method stamps ``updated_utc``, appends to ``events`` and
    clears an existing sign-off (the cleared sign-off is logged in ``events``), except
    :meth:`mark_identifier`, which only concerns de-identified export.

    Attributes
    ----------
    case_raw : dict
        The case dictionary as given.
    interpretation : dict
        The interpretation document (design.md §5).
    steps : list of StepRecord
        In the engine's order.
    signoff : dict or None
        ``{"reviewer": str, "time_utc": str}`` once signed.
    created_utc, updated_utc : str
        ISO-8601 UTC.
    marked_identifiers : list of str
        Free text the reviewer marked for removal in de-identified exports.
    events : list of dict
        Append-only log of every action (``time_utc``, ``event``, ``step``, ``by``, details).
    """

    FORMAT = "pftwork-worksheet/1"

    def __init__(self, case_raw: Mapping[str, Any], interpretation: Mapping[str, Any],
                 steps: list[StepRecord], *, signoff: dict[str, Any] | None = None,
                 created_utc: str | None = None, updated_utc: str | None = None,
                 marked_identifiers: list[str] | None = None,
                 events: list[dict[str, Any]] | None = None, now: Clock | None = None,
                 _adopt: bool = False) -> None:
        self._now = now
        stamp = utc_stamp(now)
        copier = dict if _adopt else copy.deepcopy
        self.case_raw: dict[str, Any] = copier(dict(case_raw))
        self.interpretation: dict[str, Any] = copier(dict(interpretation))
        self.steps: list[StepRecord] = list(steps)
        self.signoff = dict(signoff) if signoff else None
        self.created_utc = created_utc or stamp
        self.updated_utc = updated_utc or self.created_utc
        self.marked_identifiers: list[str] = list(marked_identifiers or [])
        self.events: list[dict[str, Any]] = list(events or [])

    @property
    def case_raw(self) -> dict[str, Any]:
        """The case dictionary as given (treat as read-only; edit through :meth:`update_case`)."""
        return self._case_raw

    @case_raw.setter
    def case_raw(self, value: dict[str, Any]) -> None:
        self._case_raw = value
        self._case = None
        self._case_json: str | None = None

    def case_raw_json(self) -> str:
        """Compact JSON text of :attr:`case_raw`, cached until the case changes.

        Top-level blocks equal to those of the previous case reuse their text, so an edit of
        one field does not re-encode large raw curves.
        """
        if self._case_json is None:
            old = getattr(self, "_block_json", {})
            new: dict[str, tuple[Any, str]] = {}
            for key, block in self._case_raw.items():
                hit = old.get(key)
                text = hit[1] if hit is not None and hit[0] == block else json.dumps(
                    block, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
                new[key] = (block, text)
            self._block_json = new
            self._case_json = "{" + ",".join(f"{json.dumps(k)}:{t}" for k, (_, t) in
                                             new.items()) + "}"
        return self._case_json

    # -- construction ---------------------------------------------------------------------
    @classmethod
    def from_case(cls, case_or_raw: Any, equations: Any = None,
                  now: Clock | None = None) -> WorksheetRecord:
        """Validate and interpret a case; every step starts ``"pending"``.

        Parameters
        ----------
        case_or_raw : Case, dict or path
            A loaded :class:`~pftwork.case_model.Case`, a case dictionary or a case file path.
        equations : optional
            Passed to :func:`pftwork.interpret.interpret`.
        now : callable, optional
            Clock (see :func:`utc_stamp`).

        Raises
        ------
        CaseError
            When the case is invalid.
        """
        case = _load(case_or_raw)
        document = _interpret(case, equations)
        steps = [StepRecord(id=str(s["id"]), engine=copy.deepcopy(dict(s)))
                 for s in document.get("steps", [])]
        record = cls(case.raw, document, steps, now=now, _adopt=True)
        record._case = case
        record.events.append({"time_utc": record.created_utc, "event": "created", "step": None,
                              "by": None})
        return record

    @classmethod
    def from_interpretation(cls, case_raw: Mapping[str, Any], interpretation: Mapping[str, Any],
                            now: Clock | None = None) -> WorksheetRecord:
        """Build a fresh record from an interpretation document already computed."""
        steps = [StepRecord(id=str(s["id"]), engine=copy.deepcopy(dict(s)))
                 for s in interpretation.get("steps", [])]
        return cls(case_raw, interpretation, steps, now=now)

    # -- queries --------------------------------------------------------------------------
    @property
    def step_ids(self) -> tuple[str, ...]:
        """Identifiers of the steps, in order."""
        return tuple(s.id for s in self.steps)

    def step(self, step_id: str) -> StepRecord:
        """The step ``step_id`` (``WorksheetError`` naming the known ids when absent)."""
        for s in self.steps:
            if s.id == step_id:
                return s
        raise WorksheetError(f"No step named {step_id!r}; the worksheet has: "
                             f"{', '.join(self.step_ids)}")

    @property
    def progress(self) -> tuple[int, int]:
        """``(reviewed, total)``: steps accepted or amended, and all steps."""
        return sum(s.decision.reviewed for s in self.steps), len(self.steps)

    def is_complete(self) -> bool:
        """``True`` when every step is accepted or amended (ready for sign-off)."""
        done, total = self.progress
        return total > 0 and done == total

    @property
    def is_signed_off(self) -> bool:
        """``True`` while a sign-off is in force."""
        return self.signoff is not None

    @property
    def unreviewed(self) -> tuple[str, ...]:
        """Ids of the steps still pending."""
        return tuple(s.id for s in self.steps if not s.decision.reviewed)

    @property
    def case(self) -> Any:
        """The validated :class:`~pftwork.case_model.Case` of ``case_raw`` (loaded once, cached)."""
        if self._case is None:
            self._case = _load(self.case_raw)
        return self._case

    @property
    def case_id(self) -> str:
        """The subject id of the case (``"case"`` when absent)."""
        subject = self.case_raw.get("subject") or {}
        return str(subject.get("id") or "case")

    # -- reviewer actions -----------------------------------------------------------------
    def accept(self, step_id: str, reviewer: str | None) -> None:
        """Accept the engine's conclusion of ``step_id`` (a no-op if already accepted)."""
        step = self.step(step_id)
        if step.decision.status == "accepted":
            return
        self._decide(step, Decision("accepted", None, None, _name(reviewer), utc_stamp(self._now)),
                     why="re-decided")

    def amend(self, step_id: str, conclusion: str, reason: str, reviewer: str | None) -> None:
        """Replace the conclusion of ``step_id`` with the reviewer's wording.

        Raises
        ------
        WorksheetError
            When ``conclusion`` or ``reason`` is blank (a reason is mandatory).
        """
        step = self.step(step_id)
        if not _blankless(conclusion):
            raise WorksheetError(f"Amending step {step_id!r}: the amended conclusion is empty; "
                                 "write the conclusion you want on record.")
        if not _blankless(reason):
            raise WorksheetError(f"Amending step {step_id!r}: a reason is mandatory for an "
                                 "amendment (the engine's conclusion stays on record).")
        self._decide(step, Decision("amended", conclusion.strip(), reason.strip(),
                                    _name(reviewer), utc_stamp(self._now)), why="re-decided")

    def add_note(self, step_id: str, text: str, author: str | None) -> None:
        """Attach a note to ``step_id`` (``WorksheetError`` when the text is blank)."""
        step = self.step(step_id)
        if not _blankless(text):
            raise WorksheetError(f"Note on step {step_id!r} is empty.")
        stamp = utc_stamp(self._now)
        step.notes.append(Note(text.strip(), _name(author), stamp))
        self._changed("note", step_id, _name(author), stamp, text=text.strip())

    def accept_all(self, reviewer: str | None) -> None:
        """Accept every pending step (amended steps keep their amendment)."""
        for step in self.steps:
            if step.decision.status == "pending":
                self.accept(step.id, reviewer)

    def sign_off(self, reviewer: str) -> None:
        """Sign the worksheet off.

        Raises
        ------
        WorksheetError
            When the reviewer name is blank, or when steps are still pending (named).
        """
        if not _blankless(reviewer):
            raise WorksheetError("Sign-off needs the reviewer's name.")
        pending = self.unreviewed
        if pending or not self.steps:
            raise WorksheetError("Sign-off refused: review every step first; still pending: "
                                 + (", ".join(pending) or "(no steps)"))
        stamp = utc_stamp(self._now)
        self.signoff = {"reviewer": reviewer.strip(), "time_utc": stamp}
        self.updated_utc = stamp
        self.events.append({"time_utc": stamp, "event": "signed_off", "step": None,
                            "by": reviewer.strip()})

    def mark_identifier(self, text: str) -> None:
        """Mark free text (a name, a number in a note…) for removal in de-identified exports."""
        if _blankless(text) and text.strip() not in self.marked_identifiers:
            self.marked_identifiers.append(text.strip())
            self.updated_utc = utc_stamp(self._now)

    def unmark_identifier(self, text: str) -> None:
        """Undo :meth:`mark_identifier`."""
        if text.strip() in self.marked_identifiers:
            self.marked_identifiers.remove(text.strip())
            self.updated_utc = utc_stamp(self._now)

    def note_source(self, digest: str, label: str | None = None) -> None:
        """Log that the case was (re)loaded from a source whose content has ``digest``.

        Used by the worksheet to tell an edited case file from one already applied; not a
        change of the review (sign-off is kept).
        """
        self.events.append({"time_utc": utc_stamp(self._now), "event": "case_loaded",
                            "step": None, "by": None, "source_digest": digest,
                            "source": label})

    @property
    def last_source_digest(self) -> str | None:
        """Digest given to the latest :meth:`note_source` (``None`` if never called)."""
        for event in reversed(self.events):
            if event.get("event") == "case_loaded":
                return event.get("source_digest")
        return None

    def update_case(self, raw: Mapping[str, Any], equations: Any = None) -> list[str]:
        """Re-validate and re-interpret edited case data.

        A step whose engine conclusion (or status) changed goes back to ``"pending"``; its
        earlier decision moves to the step's history. Steps whose conclusion is unchanged keep
        their decision (their evidence is refreshed).

        Returns
        -------
        list of str
            Ids of the steps sent back to pending.

        Raises
        ------
        CaseError
            When ``raw`` is invalid; the record is then left unchanged.
        """
        case = _load(raw)
        document = _interpret(case, equations)
        if case.raw == self.case_raw and document == self.interpretation:
            return []
        stamp = utc_stamp(self._now)
        old = {s.id: s for s in self.steps}
        new_steps, reset = [], []
        for finding in document.get("steps", []):
            step = old.get(finding["id"]) or StepRecord(id=str(finding["id"]), engine={})
            if step.decision.status != "pending" and _verdict(step.engine) != _verdict(finding):
                step.history.append({**asdict(step.decision), "superseded_utc": stamp,
                                     "why": "engine conclusion changed after a case edit",
                                     "engine_conclusion": step.engine.get("conclusion")})
                step.decision = Decision()
                reset.append(step.id)
            step.engine = copy.deepcopy(dict(finding))
            new_steps.append(step)
        self.case_raw = dict(case.raw)  # the loader's own copy: nobody else holds it
        self._case = case
        self.interpretation = document
        self.steps = new_steps
        self._changed("case_updated", None, None, stamp, reset=reset)
        return reset

    # -- serialisation --------------------------------------------------------------------
    def to_dict(self, *, copy_data: bool = True) -> dict[str, Any]:
        """JSON-safe dictionary (``format: "pftwork-worksheet/1"``).

        ``copy_data=False`` shares ``case_raw`` and ``interpretation`` with the record instead
        of deep-copying them (for immediate serialisation; do not modify the result).
        """
        copier = copy.deepcopy if copy_data else (lambda x: x)
        return {
            "format": self.FORMAT,
            "created_utc": self.created_utc,
            "updated_utc": self.updated_utc,
            "case_raw": copier(self.case_raw),
            "interpretation": copier(self.interpretation),
            "steps": [s.to_dict() for s in self.steps],
            "signoff": dict(self.signoff) if self.signoff else None,
            "marked_identifiers": list(self.marked_identifiers),
            "events": copy.deepcopy(self.events),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any], now: Clock | None = None) -> WorksheetRecord:
        """Restore a record written by :meth:`to_dict`.

        Raises
        ------
        WorksheetError
            When ``d`` is not a ``pftwork-worksheet/1`` document or lacks a required part.
        """
        if not isinstance(d, Mapping) or d.get("format") != cls.FORMAT:
            shown = d.get("format") if isinstance(d, Mapping) else type(d).__name__
            raise WorksheetError(f"format = {shown!r}: expected {cls.FORMAT!r}")
        try:
            steps = [StepRecord.from_dict(s) for s in d["steps"]]
            return cls(d["case_raw"], d["interpretation"], steps, signoff=d.get("signoff"),
                       created_utc=d["created_utc"], updated_utc=d.get("updated_utc"),
                       marked_identifiers=d.get("marked_identifiers"),
                       events=d.get("events"), now=now)
        except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
            raise WorksheetError(f"Worksheet record is incomplete or malformed: {exc!r}") from None

    @staticmethod
    def case_digest(raw: Mapping[str, Any]) -> str:
        """SHA-256 (hex) of the canonical JSON of a case dictionary."""
        text = json.dumps(raw, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                          default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def digest(self) -> str:
        """SHA-256 of the canonical JSON of :meth:`to_dict` (hex)."""
        text = json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"),
                          ensure_ascii=False)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def __eq__(self, other: object) -> bool:
        return isinstance(other, WorksheetRecord) and self.to_dict() == other.to_dict()

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        done, total = self.progress
        state = f"signed off by {self.signoff['reviewer']}" if self.signoff else "not signed off"
        return f"<WorksheetRecord {self.case_id}: {done}/{total} steps reviewed, {state}>"

    # -- internals ------------------------------------------------------------------------
    def _decide(self, step: StepRecord, decision: Decision, why: str) -> None:
        if step.decision.status != "pending":
            step.history.append({**asdict(step.decision), "superseded_utc": decision.time_utc,
                                 "why": why})
        step.decision = decision
        detail = {"conclusion": decision.conclusion, "reason": decision.reason}
        self._changed(decision.status, step.id, decision.reviewer, str(decision.time_utc),
                      **{k: v for k, v in detail.items() if v is not None})

    def _changed(self, event: str, step_id: str | None, by: str | None, stamp: str,
                 **detail: Any) -> None:
        if self.signoff is not None:
            self.events.append({"time_utc": stamp, "event": "signoff_cleared", "step": step_id,
                                "by": by, "signoff": self.signoff, "because": event})
            self.signoff = None
        self.events.append({"time_utc": stamp, "event": event, "step": step_id, "by": by,
                            **detail})
        self.updated_utc = stamp


def _blankless(text: Any) -> bool:
    return isinstance(text, str) and bool(text.strip())


def _name(text: str | None) -> str | None:
    return text.strip() if _blankless(text) else None


def _verdict(engine: Mapping[str, Any]) -> tuple[Any, Any]:
    return engine.get("conclusion"), engine.get("status")


def _load(case_or_raw: Any) -> Any:
    from pftwork.case import load_case
    from pftwork.case_model import Case

    return case_or_raw if isinstance(case_or_raw, Case) else load_case(case_or_raw)


def _interpret(case: Any, equations: Any) -> dict[str, Any]:
    from pftwork.interpret import interpret

    return interpret(case, equations=equations).to_dict()
