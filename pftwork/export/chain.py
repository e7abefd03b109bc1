"""Tamper-evident record chain of an exported worksheet (pure; no I/O).

The exported record (see :mod:`pftwork.export.document`) is a sequence of links:

* ``genesis`` — the case, equation sets and their table checksums, the interpretation document
  and the export's own metadata;
* one ``step`` link per interpretation step, in the engine's order — the engine finding, the
  reviewer's decision (status, conclusion, reason, reviewer, time), each note and the decision
  history;
* ``seal`` — the sign-off, the reviewer, the last update time and the list of step ids.

Each link stores a SHA-256 *digest per field* and the hash of the previous link; its own hash is
the SHA-256 of that link. The seal's hash is the **chain head**, shown in the notebook header.
Editing any recorded value afterwards changes a field digest (so the report can name the field),
and reordering or deleting steps breaks the ``prev``/``index`` links.

Hashes are SHA-256 over canonical JSON: ``json.dumps(obj, sort_keys=True, separators=(",", ":"),
ensure_ascii=True, allow_nan=False)`` encoded as ASCII. This is tamper *evidence*, not a
signature: someone who recomputes every hash can forge a consistent chain; the re-computation of
every result by :func:`pftwork.export.verify.verify_notebook` is the second line of defence.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "CHAIN_ALGORITHM",
    "ChainProblem",
    "canonical_json",
    "chain_problems",
    "digest",
    "genesis_fields",
    "seal_fields",
    "seal_record",
    "step_fields",
]

#: Identifier of the hashing scheme; stored in the record so that a later scheme can coexist.
CHAIN_ALGORITHM = "sha256/canonical-json/1"

#: Parts of the record covered by the genesis link.
GENESIS_KEYS = ("format", "case", "equations", "tables", "interpretation", "export")
#: Parts of the record covered by the seal (besides the ordered list of step ids).
SEAL_KEYS = ("signoff", "reviewer", "updated_utc", "events", "marked_identifiers")


def canonical_json(obj: Any) -> str:
    """The canonical JSON text of ``obj`` (sorted keys, no spaces, ASCII only, no NaN).

    Examples
    --------
    >>> canonical_json({"b": 1, "a": "é"})
    '{"a":"\\\\u00e9","b":1}'
    """
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)


def digest(obj: Any) -> str:
    """SHA-256 (hex) of the canonical JSON of ``obj``."""
    return hashlib.sha256(canonical_json(obj).encode("ascii")).hexdigest()


def genesis_fields(record: Mapping[str, Any]) -> dict[str, str]:
    """Field digests of the genesis link (one per part in :data:`GENESIS_KEYS`)."""
    return {key: digest(record.get(key)) for key in GENESIS_KEYS}


def step_fields(step: Mapping[str, Any]) -> dict[str, str]:
    """Field digests of one step: id, engine, each decision field, each note, the history.

    Decision fields are named ``decision.<field>`` and notes ``notes[i]`` so that a report can
    say exactly which recorded value was edited.
    """
    fields = {"id": digest(step.get("id")), "engine": digest(step.get("engine")),
              "history": digest(step.get("history"))}
    decision = step.get("decision") or {}
    for key in sorted(decision):
        fields[f"decision.{key}"] = digest(decision[key])
    for i, note in enumerate(step.get("notes") or []):
        fields[f"notes[{i}]"] = digest(note)
    return fields


def seal_fields(record: Mapping[str, Any]) -> dict[str, str]:
    """Field digests of the seal: the parts in :data:`SEAL_KEYS` and the ordered step ids."""
    fields = {key: digest(record.get(key)) for key in SEAL_KEYS}
    fields["step_ids"] = digest([s.get("id") for s in record.get("steps") or []
                                 if isinstance(s, Mapping)])
    return fields


def _link(kind: str, index: int, prev: str | None, fields: Mapping[str, str],
          step: str | None = None) -> dict[str, Any]:
    link: dict[str, Any] = {"kind": kind, "index": index, "prev": prev, "fields": dict(fields)}
    if step is not None:
        link["step"] = step
    link["hash"] = digest({k: v for k, v in link.items() if k != "hash"})
    return link


def seal_record(record: dict[str, Any]) -> dict[str, Any]:
    """Compute every link of ``record`` in place and return it.

    Parameters
    ----------
    record : dict
        An export record with ``case``, ``equations``, ``tables``, ``interpretation``,
        ``export``, ``steps`` (each with ``id``, ``engine``, ``decision``, ``notes``,
        ``history``), ``signoff``, ``reviewer`` and ``updated_utc``.

    Returns
    -------
    dict
        The same record with ``steps[i]["chain"]`` and ``record["chain"]`` (algorithm,
        genesis, seal, head) filled in.
    """
    genesis = _link("genesis", 0, None, genesis_fields(record))
    prev = genesis["hash"]
    for i, step in enumerate(record.get("steps") or [], start=1):
        content = {k: v for k, v in step.items() if k != "chain"}
        link = _link("step", i, prev, step_fields(content), step=str(step.get("id")))
        step["chain"] = {k: v for k, v in link.items() if k not in ("kind", "step")}
        prev = link["hash"]
    seal = _link("seal", len(record.get("steps") or []) + 1, prev, seal_fields(record))
    record["chain"] = {"algorithm": CHAIN_ALGORITHM, "genesis": genesis, "seal": seal,
                       "head": seal["hash"]}
    return record


@dataclass(frozen=True)
class ChainProblem:
    """One break in the chain: where (``step`` or ``"record"``), which ``field``, and what."""

    step: str
    field: str
    message: str

    def __str__(self) -> str:
        return f"{self.step}: {self.field}: {self.message}"


def _compare_fields(where: str, stored: Mapping[str, Any], fresh: Mapping[str, str],
                    what: str) -> list[ChainProblem]:
    problems = []
    for name in sorted(set(stored) | set(fresh)):
        if name not in fresh:
            problems.append(ChainProblem(where, name, f"{what} was removed after recording"))
        elif name not in stored:
            problems.append(ChainProblem(where, name, f"{what} was added after recording"))
        elif stored[name] != fresh[name]:
            problems.append(ChainProblem(where, name, f"{what} was changed after recording "
                                         "(its SHA-256 no longer matches the chain)"))
    return problems


def _check_link(where: str, stored: Any, kind: str, index: int, prev: str | None,
                fresh_fields: Mapping[str, str], what: str) -> tuple[list[ChainProblem], str]:
    """Problems of one link and the hash the next link must point to."""
    if not isinstance(stored, Mapping) or not isinstance(stored.get("fields"), Mapping):
        return [ChainProblem(where, "chain", "the link is missing or malformed")], ""
    problems = _compare_fields(where, stored["fields"], fresh_fields, what)
    if stored.get("index") != index:
        problems.append(ChainProblem(where, "position", f"recorded at position "
                                     f"{stored.get('index')}, found at position {index} "
                                     "(steps reordered, removed or inserted)"))
    if stored.get("prev") != prev:
        problems.append(ChainProblem(where, "prev", "does not follow the previous record "
                                     "(a record before it was removed, reordered or edited)"))
    body = {"kind": kind, "index": stored.get("index"), "prev": stored.get("prev"),
            "fields": dict(stored["fields"])}
    if kind == "step":
        body["step"] = where
    recomputed = digest(body)
    if stored.get("hash") != recomputed:
        problems.append(ChainProblem(where, "hash", "the link's own hash does not match its "
                                     "content (the chain metadata was edited)"))
    return problems, str(stored.get("hash"))


def chain_problems(record: Mapping[str, Any], expected_head: str | None = None
                   ) -> list[ChainProblem]:
    """Every break of the chain of ``record`` (empty when intact).

    Parameters
    ----------
    record : dict
        A record sealed by :func:`seal_record`, possibly edited since.
    expected_head : str, optional
        The head shown elsewhere (notebook metadata); must equal the record's own head.

    Returns
    -------
    list of ChainProblem
        Each names the step (or ``"record"``) and the field that differs.
    """
    chain = record.get("chain")
    if not isinstance(chain, Mapping):
        return [ChainProblem("record", "chain", "the record carries no chain")]
    if chain.get("algorithm") != CHAIN_ALGORITHM:
        return [ChainProblem("record", "chain.algorithm", f"unknown hashing scheme "
                             f"{chain.get('algorithm')!r} (this pftwork uses {CHAIN_ALGORITHM})")]
    problems, prev = _check_link("record", chain.get("genesis"), "genesis", 0, None,
                                 genesis_fields(record), "this part of the record")
    steps: Sequence[Any] = record.get("steps") or []
    for i, step in enumerate(steps, start=1):
        if not isinstance(step, Mapping):
            problems.append(ChainProblem(f"steps[{i - 1}]", "step", "not a step record"))
            continue
        content = {k: v for k, v in step.items() if k != "chain"}
        found, prev = _check_link(str(step.get("id")), step.get("chain"), "step", i, prev,
                                  step_fields(content), "this recorded value")
        problems.extend(found)
    found, head = _check_link("sign-off", chain.get("seal"), "seal", len(steps) + 1, prev,
                              seal_fields(record), "this part of the sign-off")
    problems.extend(found)
    if chain.get("head") != head:
        problems.append(ChainProblem("record", "chain.head", "the recorded chain head is not "
                                     "the hash of the last link"))
    if expected_head is not None and expected_head != chain.get("head"):
        problems.append(ChainProblem("record", "chain.head", "the chain head in the notebook "
                                     "metadata differs from the embedded record's"))
    return problems
