"""The ``pftwork`` command line (design.md §4).

Every command that fails because of its input exits 2 with one line on stderr naming the
field, the value and what was expected — never a traceback.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import NoReturn

from ._version import __version__
from .errors import EquationSetError, PftworkError

__all__ = ["main"]

CAUTION_LINE = ("Decision support only: the signing physician decides; local protocols and "
                "licensed practice prevail. Not a certified medical device.")


class _Parser(argparse.ArgumentParser):
    """argparse with the one-line error of design.md §4 (no usage block on stderr)."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {_one_line(message)} (see {self.prog} --help)\n")


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="pftwork", description="Documented, auditable PFT "
                "interpretation worksheets. " + CAUTION_LINE)
    p.add_argument("--version", action="version", version=f"pftwork {__version__}")
    sub = p.add_subparsers(dest="command", required=True)

    d = sub.add_parser("demo", help="build, execute and verify the worksheet notebook for the "
                       "bundled invented demo case")
    d.add_argument("--out", default="pftwork-demo", help="output folder (default: ./pftwork-demo)")
    d.add_argument("--all", action="store_true", help="every bundled demo case, not only the main one")

    i = sub.add_parser("interpret", help="automatic interpretation of a case file")
    i.add_argument("case", help="case file (pftwork-case/1 JSON)")
    i.add_argument("--json", action="store_true", help="print the interpretation document as JSON")
    i.add_argument("--values-only", action="store_true", help="with --json: only the values block")
    i.add_argument("--equations", help="comma-separated equation sets, e.g. gli-2012,gli-2021")

    w = sub.add_parser("worksheet", help="non-interactive worksheet notebook with the automatic "
                       "decisions, exported and executed")
    w.add_argument("case")
    w.add_argument("-o", "--output", required=True, help="notebook to write (.ipynb)")
    w.add_argument("--reviewer", default="automatic (pftwork worksheet)",
                   help="name recorded as the reviewer who accepted the engine's conclusions")
    w.add_argument("--deidentify", action="store_true", help="remove direct identifiers")
    w.add_argument("--html", action="store_true", help="also write a self-contained HTML copy")
    w.add_argument("--equations", help="comma-separated equation sets")

    v = sub.add_parser("verify", help="re-execute an exported worksheet and check every recorded "
                       "result and the record chain (exit 0 valid, 1 mismatch, 2 unreadable)")
    v.add_argument("notebook")
    v.add_argument("--no-execute", action="store_true",
                   help="check the chain and recompute in this process without starting a kernel")

    b = sub.add_parser("batch", help="vectorised interpretation of a CSV/Parquet table of tests, "
                       "one row per test (design.md §6)")
    b.add_argument("table", help="input table (.csv, or .parquet with pyarrow installed)")
    b.add_argument("-o", "--output", required=True, help="table to write (.csv or .parquet)")
    b.add_argument("--compare", metavar="SET_A,SET_B",
                   help="two spirometry equation sets, e.g. gli-global-2022,gli-2012: adds "
                   "the second set's columns (suffix @SET_B) and pattern_changes")
    b.add_argument("--mapping", metavar="MAP.json",
                   help='JSON object renaming other column spellings: {"their": "ours"}')

    pr = sub.add_parser("present", help="serve a read-only, de-identified page of a worksheet "
                        "for a case conference (127.0.0.1)")
    pr.add_argument("source", help="case file, worksheet autosave (.pftwork.json) or notebook")
    pr.add_argument("--port", type=int, default=8765)
    pr.add_argument("--once", action="store_true", help="write the page and exit (no server)")
    return p


def _equations(text: str | None) -> dict[str, str] | None:
    if not text:
        return None
    from .reference import get_equation_set

    kinds = {"gli-global-2022": "spirometry", "gli-2012": "spirometry", "gli-2021": "volumes",
             "gli-2017": "diffusion"}
    chosen: dict[str, str] = {}
    for name in (t.strip() for t in text.split(",") if t.strip()):
        get_equation_set(name)  # raises EquationSetError naming the bad id
        chosen[kinds[name]] = name
    return chosen


def _load(path: str):
    from .case import load_case

    return load_case(path)


def cmd_interpret(args: argparse.Namespace) -> int:
    from .interpret import interpret

    result = interpret(_load(args.case), equations=_equations(args.equations))
    doc = result.to_dict()
    if args.json:
        print(json.dumps(doc["values"] if args.values_only else doc, indent=2))
    else:
        from .interpret.render import render_text

        print(render_text(doc))
    return 0


def _record(case_path: str, reviewer: str, equations: dict[str, str] | None):
    from .worksheet.record import WorksheetRecord

    record = WorksheetRecord.from_case(_load(case_path), equations=equations)
    record.accept_all(reviewer)
    record.sign_off(reviewer)
    return record


def cmd_worksheet(args: argparse.Namespace) -> int:
    from .export.notebook import export_notebook

    out = Path(args.output)
    if out.suffix != ".ipynb":
        raise _usage("-o", args.output, "a path ending in .ipynb")
    record = _record(args.case, args.reviewer, _equations(args.equations))
    export_notebook(record, out, execute=True, deidentify=args.deidentify)
    print(f"wrote {out}")
    if args.html:
        from .export.html import write_html

        html_path = out.with_suffix(".html")
        write_html(out, html_path)  # from the notebook itself: same record, same chain head
        print(f"wrote {html_path}")
    return 0


def cmd_verify(args: argparse.Namespace) -> int:
    from .export.verify import verify_notebook

    report = verify_notebook(args.notebook, execute=not args.no_execute)
    print(report.format_report())
    if report.exit_code == 2 and report.error_line:
        print(f"pftwork verify: error: {report.error_line}", file=sys.stderr)
    return report.exit_code


def cmd_batch(args: argparse.Namespace) -> int:
    from .batch import interpret_table, read_mapping, read_table, write_table

    compare = None
    if args.compare is not None:
        compare = [t.strip() for t in args.compare.split(",") if t.strip()]
    mapping = read_mapping(args.mapping) if args.mapping else None
    table = read_table(args.table, mapping)
    result = interpret_table(table, compare=compare)
    write_table(result, args.output)
    bad = int((result["error"] != "").sum())
    print(f"wrote {args.output}: {len(result)} rows, {bad} with an error (see the 'error' column)")
    return 0


def cmd_present(args: argparse.Namespace) -> int:
    from .export.present import present

    return present(args.source, port=args.port, once=args.once)


def cmd_demo(args: argparse.Namespace) -> int:
    from . import DEMO_CASE, data_path, demo_cases
    from .export.notebook import export_notebook
    from .export.verify import verify_notebook
    from .interpret import interpret

    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _usage("--out", args.out, "a folder that can be created and written",
                     exc.strerror) from None
    paths = demo_cases() if args.all else [data_path(DEMO_CASE)]
    worst = 0
    for path in paths:
        record = _record(str(path), "pftwork demo (automatic review)", None)
        nb_path = out / f"{path.stem}.ipynb"
        export_notebook(record, nb_path, execute=True)
        report = verify_notebook(nb_path)
        summary = interpret(_load(str(path))).summary
        print(f"{path.stem}: pattern {summary.get('pattern')}; notebook {nb_path}; "
              f"verify: {report.status}")
        worst = max(worst, report.exit_code)
    if not args.all:
        from .interpret.render import render_text

        print()
        print(render_text(interpret(_load(str(paths[0]))).to_dict()))
    print()
    print(CAUTION_LINE)
    return worst


def _usage(field: str, value: object, expected: str, hint: str | None = None) -> PftworkError:
    from .errors import FieldError

    return FieldError(field, value, expected, hint)


def _one_line(text: str) -> str:
    """The message on one line (design.md §4: exit 2 comes with exactly one stderr line)."""
    return " ".join(str(text).split())


#: Exit status of a defect inside pftwork (sysexits.h EX_SOFTWARE); 2 stays "bad input".
INTERNAL_ERROR = 70

COMMANDS = {"interpret": cmd_interpret, "worksheet": cmd_worksheet, "verify": cmd_verify,
            "present": cmd_present, "demo": cmd_demo, "batch": cmd_batch}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``pftwork`` console script."""
    args = _parser().parse_args(argv)
    where = f"pftwork {args.command}: error:"
    try:
        return COMMANDS[args.command](args)
    except (PftworkError, EquationSetError) as exc:
        print(f"{where} {_one_line(str(exc))}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # e.g. piped into head
        return 0
    except OSError as exc:  # a file that cannot be read or written, named by the system
        name = exc.filename if exc.filename is not None else "a file"
        message = (f"{name}: expected a readable input or a writable output path — "
                   f"{exc.strerror or exc}")
        print(f"{where} {_one_line(message)}", file=sys.stderr)
        return 2
    except Exception as exc:  # a defect in pftwork, not in the input: one line, not a traceback
        if os.environ.get("PFTWORK_DEBUG"):
            raise
        message = (f"internal error ({type(exc).__name__}: {exc}); please report it (set "
                   "PFTWORK_DEBUG=1 to see the traceback)")
        print(f"{where} {_one_line(message)}", file=sys.stderr)
        return INTERNAL_ERROR


if __name__ == "__main__":
    raise SystemExit(main())
