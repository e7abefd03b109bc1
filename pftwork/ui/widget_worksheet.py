"""The reviewer's worksheet in Jupyter: one panel per interpretation step, decisions, sign-off.

:class:`Worksheet` is an ``ipywidgets.VBox`` over a :class:`~pftwork.worksheet.WorksheetRecord`.
Every action (accept, amend, note, sign-off, case edit) goes to the record first and is then
autosaved atomically beside the notebook; the panels are redrawn from the record, so what is
shown is always what is saved. Errors raised by an action are shown in the panel where it
happened (ipywidgets' callback dispatcher would otherwise swallow them). Every widget a test or
a browser needs has a stable CSS class ``pft-…``.
"""

from __future__ import annotations

import html
import json
import time
import traceback
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import ipywidgets as widgets
import plotly.graph_objects as go
import plotly.io as pio

from pftwork.errors import PftworkError, WorksheetError
from pftwork.ui import plots, render
from pftwork.ui.style import COLORS, css_block
from pftwork.ui.widget_entry import CaseForm
from pftwork.worksheet.record import WorksheetRecord
from pftwork.worksheet.storage import autosave_path, load_record, save_record

__all__ = ["StepPanel", "Worksheet"]

_FALLBACK_CAUTIONS = (
    "Decision support only: the signing physician decides the final interpretation.",
    "Local protocols and licensed clinical practice prevail.",
    "pftwork is not a certified medical device.",
)


def figure_output(fig: go.Figure, css: str = "pft-plot") -> widgets.Output:
    """An ``Output`` widget showing ``fig`` through the plotly MIME renderer (no FigureWidget)."""
    out = widgets.Output()
    out.add_class(css)
    show_figure(out, fig)
    return out


def show_figure(out: widgets.Output, fig: go.Figure) -> None:
    """Replace the content of ``out`` with ``fig`` (plain JSON; deterministic text/plain)."""
    spec = json.loads(pio.to_json(fig, validate=False))
    # Fixed-size figures: plotly's "responsive" mode measures the widget's container, which
    # JupyterLab can report as 0 px high during a resize (the chart then collapses).
    spec["config"] = {"displaylogo": False,
                      "modeBarButtonsToRemove": ["lasso2d", "select2d"]}
    title = (fig.layout.title.text or "figure") if fig.layout.title else "figure"
    out.outputs = ({"output_type": "display_data", "metadata": {},
                    "data": {"application/vnd.plotly.v1+json": spec,
                             "text/plain": f"<plotly figure: {title}>"}},)


class StepPanel(widgets.VBox):
    """The panel of one step: evidence, engine conclusion, decision controls, notes, errors."""

    def __init__(self, number: int, step_id: str) -> None:
        self.number, self.step_id = number, step_id
        self.header = widgets.HTML()
        self.values = widgets.HTML()
        self.plots = widgets.HBox([])
        self.body = widgets.HTML()
        self.body.add_class("pft-decision")
        self.accept_button = self._button("Accept", "pft-accept", "check")
        self.amend_toggle = self._button("Amend…", "pft-amend-toggle", "pencil")
        self.note_toggle = self._button("Add note…", "pft-note-toggle", "comment")
        self.amend_text = widgets.Textarea(placeholder="Amended conclusion (your wording)",
                                           layout=widgets.Layout(width="98%", height="70px"))
        self.amend_text.add_class("pft-amend-text")
        self.amend_reason = widgets.Text(placeholder="Reason for the amendment (mandatory)",
                                         layout=widgets.Layout(width="98%"))
        self.amend_reason.add_class("pft-amend-reason")
        self.amend_save = self._button("Record amendment", "pft-amend-save", "save")
        self.amend_box = widgets.VBox([self.amend_text, self.amend_reason, self.amend_save],
                                      layout=widgets.Layout(display="none"))
        self.amend_box.add_class("pft-amend-box")
        self.note_text = widgets.Textarea(placeholder="Note for the record",
                                          layout=widgets.Layout(width="98%", height="56px"))
        self.note_text.add_class("pft-note-text")
        self.note_save = self._button("Save note", "pft-note-save", "save")
        self.note_box = widgets.VBox([self.note_text, self.note_save],
                                     layout=widgets.Layout(display="none"))
        self.note_box.add_class("pft-note-box")
        self.error = widgets.HTML("")
        self.error.add_class("pft-error")
        controls = widgets.HBox([self.accept_button, self.amend_toggle, self.note_toggle])
        controls.add_class("pft-controls")
        self.amend_toggle.on_click(lambda _: self._toggle(self.amend_box))
        self.note_toggle.on_click(lambda _: self._toggle(self.note_box))
        super().__init__([self.header, self.values, self.plots, self.body, controls,
                          self.amend_box, self.note_box, self.error])
        self.add_class("pft-panel")
        self.add_class(f"pft-step-{step_id}")

    @staticmethod
    def _button(text: str, css: str, icon: str) -> widgets.Button:
        button = widgets.Button(description=text, icon=icon,
                                layout=widgets.Layout(width="auto"))
        button.add_class(css)
        return button

    @staticmethod
    def _toggle(box: widgets.Box) -> None:
        box.layout.display = "" if box.layout.display == "none" else "none"

    def show(self, step: Mapping[str, Any], values_html: str) -> None:
        """Redraw from the step record (``StepRecord.to_dict()``)."""
        self.header.value = render.step_header_html(self.number, step)
        self.values.value = values_html
        self.body.value = render.decision_html(step)
        status = step["decision"]["status"]
        self.accept_button.disabled = status == "accepted"
        self.accept_button.description = "Accepted" if status == "accepted" else "Accept"
        if not self.amend_text.value:
            self.amend_text.value = step["decision"].get("conclusion") or \
                step["engine"].get("conclusion", "")


class Worksheet(widgets.VBox):
    """Review a case step by step and sign it off; autosaved beside the notebook.

    Parameters
    ----------
    case : Case, dict, str or Path, optional
        The case (a path is read as a case file). If an autosave for the same case id exists,
        it is resumed; if the case data differ from it, the record is updated (steps whose
        conclusion changed go back to pending). Omit when ``record`` is given.
    record : WorksheetRecord, optional
        Use this record as it is.
    autosave : path or False, optional
        Autosave file; default ``<case id>.pftwork.json`` in the current folder (or
        ``$PFTWORK_AUTOSAVE_DIR``); ``False`` disables saving.
    equations : optional
        Equation sets passed to the interpretation.
    reviewer : str
        Pre-filled reviewer name.
    now : callable, optional
        Clock for the record (tests).

    Examples
    --------
    >>> ws = Worksheet.from_file("case.json")          # doctest: +SKIP
    >>> ws                                             # doctest: +SKIP
    """

    def __init__(self, case: Any = None, *, record: WorksheetRecord | None = None,
                 autosave: str | Path | bool | None = None, equations: Any = None,
                 reviewer: str = "", now: Callable[[], Any] | None = None) -> None:
        self._equations = equations
        self.last_error: str | None = None
        self.last_update_s: float | None = None
        raw = _raw_of(case) if case is not None else None
        if record is None and raw is None:
            raise WorksheetError("Worksheet needs a case (file, dictionary or Case) or a record.")
        case_id = (record.case_id if record is not None else
                   str((raw.get("subject") or {}).get("id") or "case"))  # type: ignore[union-attr]
        self.autosave_path: Path | None = (None if autosave is False else
                                           autosave_path(case_id) if autosave in (None, True)
                                           else Path(autosave))  # type: ignore[arg-type]
        self.resumed = False
        if record is None:
            record = self._open(case, raw, now)  # type: ignore[arg-type]
        elif now is not None:
            record._now = now
        self.record = record
        self._build(reviewer)
        self.refresh()
        self.save()

    # -- construction ---------------------------------------------------------------------
    @classmethod
    def from_file(cls, case_path: str | Path, **kwargs: Any) -> Worksheet:
        """Open the case file ``case_path``, resuming its autosave if there is one."""
        return cls(Path(case_path), **kwargs)

    @classmethod
    def resume(cls, path: str | Path, **kwargs: Any) -> Worksheet:
        """Reopen exactly the record saved at ``path`` (and keep autosaving there)."""
        kwargs.setdefault("autosave", Path(path))
        return cls(record=load_record(path), **kwargs)

    def _open(self, case: Any, raw: dict[str, Any], now: Any) -> WorksheetRecord:
        """Resume the autosave if any; apply the given case only if its source changed.

        A case source (file or dictionary) already applied to the autosave is not applied
        again, so edits made in the worksheet's form survive re-running the notebook; an
        edited case file is applied (steps whose conclusion changes go back to pending).
        """
        path = self.autosave_path
        digest = WorksheetRecord.case_digest(raw)
        label = str(case) if isinstance(case, (str, Path)) else "case dictionary"
        if path is not None and path.exists():
            record = load_record(path)
            record._now = now
            self.resumed = True
            if digest != record.last_source_digest:
                if record.case_raw != raw:
                    record.update_case(raw, self._equations)
                record.note_source(digest, label)
            return record
        record = WorksheetRecord.from_case(case if not isinstance(case, (str, Path)) else raw,
                                           equations=self._equations, now=now)
        record.note_source(digest, label)
        return record

    def _build(self, reviewer: str) -> None:
        rec = self.record
        self.header = widgets.HTML()
        self.cautions = widgets.HTML(render.cautions_html(_cautions(rec)))
        self.cautions.add_class("pft-cautions")
        self.reviewer = widgets.Text(value=reviewer, placeholder="your name",
                                     description="Reviewer", layout=widgets.Layout(width="320px"))
        self.reviewer.add_class("pft-reviewer")
        self.progress = widgets.IntProgress(min=0, max=max(1, len(rec.steps)),
                                            layout=widgets.Layout(width="220px"),
                                            style={"bar_color": COLORS["pre"]})
        self.progress.add_class("pft-progress")
        self.progress_label = widgets.HTML()
        self.progress_label.add_class("pft-progress-label")
        self.status_line = widgets.HTML()
        self.status_line.add_class("pft-autosave")
        toolbar = widgets.HBox([self.reviewer, self.progress, self.progress_label])
        toolbar.add_class("pft-toolbar")
        self.overview = widgets.Output()
        self.overview.add_class("pft-zplot")
        self.panels = [StepPanel(i + 1, s.id) for i, s in enumerate(rec.steps)]
        for panel in self.panels:
            self._wire(panel)
        self.signoff_banner = widgets.HTML()
        self.signoff_banner.add_class("pft-signoff-banner")
        self.signoff_button = StepPanel._button("Sign off worksheet", "pft-signoff", "lock")
        self.signoff_error = widgets.HTML("")
        self.signoff_error.add_class("pft-error")
        self.signoff_error.add_class("pft-signoff-error")
        self.signoff_button.on_click(lambda _: self._guard(self.signoff_error, self._sign_off))
        signoff_box = widgets.VBox([
            widgets.HTML('<div class="pft-section-title">Sign-off</div><div class="pft-meta">'
                         "Signing records your name and the time; it is refused until every "
                         "step is accepted or amended. Any later change clears the sign-off."
                         "</div>"),
            self.signoff_banner, self.signoff_button, self.signoff_error])
        signoff_box.add_class("pft-panel")
        signoff_box.add_class("pft-signoff-box")
        review = widgets.VBox([widgets.HTML('<div class="pft-section-title">Overview</div>'),
                               self.overview, *self.panels, signoff_box])
        review.add_class("pft-review")
        self.form = CaseForm(rec.case_raw, self._on_case_edit)
        self.audit = widgets.HTML()
        self.audit.add_class("pft-audit")
        self.mark_text = widgets.Text(placeholder="e.g. a name or number written in a note",
                                      layout=widgets.Layout(width="360px"))
        self.mark_text.add_class("pft-mark-text")
        self.mark_button = StepPanel._button("Mark for de-identification", "pft-mark-add",
                                             "eye-slash")
        self.marked = widgets.HTML()
        self.marked.add_class("pft-marked")
        self.mark_error = widgets.HTML("")
        self.mark_error.add_class("pft-error")
        self.mark_button.on_click(lambda _: self._guard(self.mark_error, self._mark))
        record_tab = widgets.VBox([
            widgets.HTML('<div class="pft-section-title">De-identification</div><div '
                         'class="pft-meta">Free text to remove from de-identified exports, in '
                         "addition to the subject's name, birth date and record number.</div>"),
            widgets.HBox([self.mark_text, self.mark_button]), self.marked, self.mark_error,
            widgets.HTML('<div class="pft-section-title">Audit log</div>'), self.audit])
        self.tabs = widgets.Tab(children=[review, self.form, record_tab],
                                titles=("Review", "Case data", "Record"))
        self.tabs.add_class("pft-tabs")
        super().__init__([widgets.HTML(css_block()), self.header, self.cautions, toolbar,
                          self.status_line, self.tabs])
        self.add_class("pft-worksheet")

    def _wire(self, panel: StepPanel) -> None:
        sid = panel.step_id
        panel.accept_button.on_click(lambda _: self._guard(panel.error, self._accept, sid))
        panel.amend_save.on_click(lambda _: self._guard(panel.error, self._amend, sid))
        panel.note_save.on_click(lambda _: self._guard(panel.error, self._note, sid))

    def __repr__(self) -> str:
        return repr(self.record).replace("WorksheetRecord", "Worksheet", 1)

    # -- public ---------------------------------------------------------------------------
    def panel(self, step_id: str) -> StepPanel:
        """The panel of ``step_id``."""
        for panel in self.panels:
            if panel.step_id == step_id:
                return panel
        raise WorksheetError(f"No step named {step_id!r}; the worksheet has: "
                             f"{', '.join(p.step_id for p in self.panels)}")

    def save(self) -> Path | None:
        """Autosave now (errors are shown in the status line, never raised)."""
        if self.autosave_path is None:
            self.status_line.value = "Autosave off."
            return None
        try:
            save_record(self.record, self.autosave_path)
        except PftworkError as exc:
            self.status_line.value = render.error_html(str(exc))
            self.last_error = str(exc)
            return None
        self.status_line.value = (f"Saved {html.escape(self.record.updated_utc)} to "
                                  f"<code>{html.escape(str(self.autosave_path))}</code>"
                                  + (" (resumed)" if self.resumed else ""))
        return self.autosave_path

    def refresh(self, step_ids: tuple[str, ...] | None = None, *, plots_too: bool = True) -> None:
        """Redraw header, progress, the given panels (all by default) and the sign-off banner."""
        rec = self.record
        self.header.value = render.header_html(rec.case_raw, rec.interpretation)
        done, total = rec.progress
        self.progress.max, self.progress.value = max(1, total), done
        self.progress_label.value = f"{done} of {total} steps reviewed"
        values = rec.interpretation.get("values") or {}
        for panel in self.panels:
            if step_ids is None or panel.step_id in step_ids:
                step = rec.step(panel.step_id).to_dict()
                panel.show(step, self._values_html(panel.step_id, values))
        if step_ids is None and plots_too:
            self._draw_plots()
        self._draw_signoff()
        self.audit.value = _audit_html(rec)
        self.marked.value = ("Marked: " + ", ".join(f"<code>{html.escape(t)}</code>" for t in
                                                    rec.marked_identifiers)
                             if rec.marked_identifiers else "Nothing marked.")

    # -- actions --------------------------------------------------------------------------
    def _guard(self, error: widgets.HTML, action: Callable[..., Any], *args: Any) -> None:
        error.value = ""
        try:
            action(*args)
        except PftworkError as exc:
            self.last_error = str(exc)
            error.value = render.error_html(str(exc))
        except Exception as exc:  # surfaced on purpose: the dispatcher would swallow it
            self.last_error = traceback.format_exc()
            error.value = render.error_html(f"Unexpected error ({type(exc).__name__}): {exc}. "
                                            "Nothing was recorded; please report this.")

    def _name(self) -> str:
        name = self.reviewer.value.strip()
        if not name:
            raise WorksheetError("Enter your name in the Reviewer field first: every decision "
                                 "is recorded with the reviewer's name.")
        return name

    def _accept(self, step_id: str) -> None:
        self.record.accept(step_id, self._name())
        self._changed((step_id,))

    def _amend(self, step_id: str) -> None:
        panel = self.panel(step_id)
        self.record.amend(step_id, panel.amend_text.value, panel.amend_reason.value, self._name())
        panel.amend_reason.value = ""
        panel.amend_box.layout.display = "none"
        self._changed((step_id,))

    def _note(self, step_id: str) -> None:
        panel = self.panel(step_id)
        self.record.add_note(step_id, panel.note_text.value, self._name())
        panel.note_text.value = ""
        panel.note_box.layout.display = "none"
        self._changed((step_id,))

    def _sign_off(self) -> None:
        self.record.sign_off(self.reviewer.value)
        self._changed(())

    def _mark(self) -> None:
        text = self.mark_text.value.strip()
        if not text:
            raise WorksheetError("Type the text to mark first.")
        self.record.mark_identifier(text)
        self.mark_text.value = ""
        self._changed(())

    def _on_case_edit(self, raw: dict[str, Any]) -> None:
        start = time.perf_counter()
        reset = self.record.update_case(raw, self._equations)
        for panel in self.panels:
            panel.amend_text.value = ""
        self.refresh()
        self.save()
        self.last_update_s = time.perf_counter() - start
        if reset:
            self.status_line.value += (" — case edited; back to review: "
                                       + html.escape(", ".join(reset)))

    def _changed(self, step_ids: tuple[str, ...]) -> None:
        self.refresh(step_ids)
        self.save()

    # -- drawing --------------------------------------------------------------------------
    def _values_html(self, step_id: str, values: Mapping[str, Any]) -> str:
        if step_id == "validity":
            return render.quality_html(self.record.interpretation.get("quality") or {})
        blocks = render.STEP_BLOCKS.get(step_id)
        return render.values_table_html(values, blocks) if blocks else ""

    def _draw_plots(self) -> None:
        rec = self.record
        overview = plots.zscore_figure(rec.interpretation.get("values") or {})
        overview.update_layout(width=900)
        show_figure(self.overview, overview)
        case = _case_or_none(rec)
        by_step: dict[str, list[widgets.Output]] = {}
        if case is not None:
            by_step["validity"] = self._curve_outputs(case)
            points = _trend_points(case, rec.interpretation)
            if len(points) > 1:
                fig = plots.trend_figure(points)
                fig.update_layout(width=760)
                by_step["change"] = [figure_output(fig)]
        for panel in self.panels:
            outputs = by_step.get(panel.step_id, [])
            if list(panel.plots.children) != outputs:
                panel.plots.children = outputs

    def _curve_outputs(self, case: Any) -> list[widgets.Output]:
        """Flow-volume and volume-time plots, rebuilt only when the raw curves change."""
        spiro = self.record.case_raw.get("spirometry") or {}
        key = [(spiro.get(phase) or {}).get("trials") for phase in ("pre", "post")]
        cached = getattr(self, "_curve_cache", None)
        if cached is not None and cached[0] == key:
            return cached[1]
        curves = plots.select_curves(case)
        figs = ([plots.flow_volume_figure(curves), plots.volume_time_figure(curves)]
                if curves else [])
        for fig in figs:
            fig.update_layout(width=440)
        outputs = [figure_output(f) for f in figs]
        self._curve_cache = (key, outputs)
        return outputs

    def _draw_signoff(self) -> None:
        rec = self.record
        self.signoff_button.disabled = rec.signoff is not None
        if rec.signoff:
            self.signoff_banner.value = (
                f'<div class="pft-banner pft-banner-signed">Signed off by '
                f'{html.escape(rec.signoff["reviewer"])} at '
                f'{html.escape(rec.signoff["time_utc"])}</div>')
        else:
            pending = rec.unreviewed
            text = ("All steps reviewed: ready for sign-off." if not pending else
                    f"Not signed off. Still to review: {html.escape(', '.join(pending))}.")
            self.signoff_banner.value = f'<div class="pft-banner pft-banner-open">{text}</div>'


def _raw_of(case: Any) -> dict[str, Any]:
    from pftwork.case import read_case_file
    from pftwork.case_model import Case

    if isinstance(case, Case):
        return dict(case.raw)
    if isinstance(case, (str, Path)):
        return read_case_file(case)
    if isinstance(case, Mapping):
        return dict(case)
    raise WorksheetError(f"case = {type(case).__name__}: expected a case file path, a case "
                         "dictionary or a pftwork Case")


def _case_or_none(record: WorksheetRecord) -> Any:
    try:
        return record.case
    except PftworkError:
        return None


def _cautions(record: WorksheetRecord) -> tuple[str, ...]:
    listed = record.interpretation.get("cautions")
    if listed:
        return tuple(listed)
    try:
        from pftwork.interpret.cautions import CAUTIONS
    except ImportError:  # pragma: no cover - the interpretation package ships them
        return _FALLBACK_CAUTIONS
    return tuple(CAUTIONS)


def _trend_points(case: Any, interpretation: Mapping[str, Any]) -> list[dict[str, Any]]:
    """FEV1, FVC (pre) and DLCO z of the current test and of every earlier test in the case."""
    values = interpretation.get("values") or {}
    current = {"date": str(case.test.date) if case.test.date else None,
               "FEV1": (values.get("pre") or {}).get("FEV1", {}).get("z"),
               "FVC": (values.get("pre") or {}).get("FVC", {}).get("z"),
               "DLCO": (values.get("diffusion") or {}).get("DLCO", {}).get("z")}
    points = [current]
    sex = case.subject.sex
    from pftwork.interpret.change import history_values as prior_values

    equations = interpretation.get("equations") or {}
    if sex not in ("male", "female") or not equations:
        return points
    for h in case.history:
        try:
            vals = prior_values(case, h, equations, sex)
        except (PftworkError, KeyError, ValueError, TypeError):
            continue
        points.append({"date": str(h.date) if h.date else None,
                       **{p: (vals.get(p) or {}).get("z") for p in ("FEV1", "FVC", "DLCO")}})
    return [p for p in points if p["date"]]


def _audit_html(record: WorksheetRecord) -> str:
    rows = "".join(
        f"<tr><td>{html.escape(str(e.get('time_utc')))}</td><td>{html.escape(str(e.get('event')))}"
        f"</td><td>{html.escape(str(e.get('step') or ''))}</td>"
        f"<td>{html.escape(str(e.get('by') or ''))}</td>"
        f"<td>{html.escape(str(e.get('reason') or e.get('text') or e.get('because') or ''))}"
        f"</td></tr>" for e in record.events)
    return ('<div class="pft-meta">Every action, oldest first; nothing is erased.</div>'
            '<table class="pft-evidence pft-log"><tr><th>Time (UTC)</th><th>Event</th><th>Step</th>'
            f"<th>By</th><th>Detail</th></tr>{rows}</table>")
