"""The case form: enter or correct a test's values, units beside every field.

Each field maps to a dotted path in the case dictionary (design.md §2). Editing a field builds
the new case dictionary and hands it to the ``on_change`` callback (the worksheet revalidates
and recomputes). A :class:`~pftwork.errors.CaseError` from the loader is shown next to the
field it names, never as a traceback; the form keeps what the user typed so it can be fixed.
Blocks that carry trials are graded from those trials: their summary fields are read-only
here (edit the case file to change trials).
"""

from __future__ import annotations

import copy
import html
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import ipywidgets as widgets

from pftwork.errors import CaseError, PftworkError

__all__ = ["FIELDS", "CaseForm", "FormField", "parse_number"]

_METADATA = {"unit", "method", "trials", "bronchodilator", "hemoglobin_g_dl", "cohb_percent"}


@dataclass(frozen=True)
class FormField:
    """One form field: dotted case path, label, unit text and kind (number, text or choice)."""

    path: str
    label: str
    unit: str = ""
    kind: str = "number"
    choices: tuple[str, ...] = ()
    section: str = ""


FIELDS: tuple[FormField, ...] = (
    FormField("subject.id", "Subject id", "", "text", section="Subject"),
    FormField("subject.sex", "Sex at birth", "", "choice", ("female", "male", "both"), "Subject"),
    FormField("subject.age_years", "Age", "years", section="Subject"),
    FormField("subject.height_cm", "Height", "cm", section="Subject"),
    FormField("subject.weight_kg", "Weight", "kg", section="Subject"),
    FormField("test.date", "Test date", "YYYY-MM-DD", "text", section="Test"),
    FormField("test.altitude_m", "Altitude", "m", section="Test"),
    FormField("test.question", "Clinical question", "", "text", section="Test"),
    FormField("spirometry.pre.FEV1", "FEV1 pre-BD", "L BTPS", section="Spirometry"),
    FormField("spirometry.pre.FVC", "FVC pre-BD", "L BTPS", section="Spirometry"),
    FormField("spirometry.pre.PEF", "PEF pre-BD", "L/s", section="Spirometry"),
    FormField("spirometry.pre.FEF25_75", "FEF25-75 pre-BD", "L/s", section="Spirometry"),
    FormField("spirometry.post.FEV1", "FEV1 post-BD", "L BTPS", section="Spirometry"),
    FormField("spirometry.post.FVC", "FVC post-BD", "L BTPS", section="Spirometry"),
    FormField("volumes.method", "Method", "", "choice",
              ("", "plethysmography", "nitrogen_washout", "helium_dilution", "imaging"),
              "Lung volumes"),
    FormField("volumes.TLC", "TLC", "L BTPS", section="Lung volumes"),
    FormField("volumes.RV", "RV", "L BTPS", section="Lung volumes"),
    FormField("volumes.FRC", "FRC", "L BTPS", section="Lung volumes"),
    FormField("diffusion.unit", "Diffusion unit", "", "choice", ("SI", "traditional"),
              "Gas transfer"),
    FormField("diffusion.DLCO", "DLCO", "diffusion unit", section="Gas transfer"),
    FormField("diffusion.VA", "VA", "L BTPS", section="Gas transfer"),
    FormField("diffusion.KCO", "KCO", "diffusion unit per L", section="Gas transfer"),
    FormField("diffusion.hemoglobin_g_dl", "Haemoglobin", "g/dL", section="Gas transfer"),
    FormField("airway_resistance.sRaw", "sRaw", "kPa*s", section="Airway resistance"),
)
_DIFFUSION_UNITS = {"SI": ("mmol/min/kPa", "mmol/min/kPa/L"),
                    "traditional": ("mL/min/mmHg", "mL/min/mmHg/L")}


def parse_number(text: str) -> float | None:
    """Parse a typed number (``""`` gives ``None``; a decimal comma is accepted).

    Raises
    ------
    ValueError
        When the text is not a number.
    """
    text = text.strip().replace(",", ".")
    if not text:
        return None
    value = float(text)
    if value != value:  # NaN
        raise ValueError("nan")
    return value


def _get(raw: Mapping[str, Any], path: str) -> Any:
    node: Any = raw
    for key in path.split("."):
        if not isinstance(node, Mapping) or key not in node:
            return None
        node = node[key]
    return node


def _set(raw: dict[str, Any], path: str, value: Any) -> None:
    """Set ``path`` to ``value`` (``None`` removes it, and blocks left without values)."""
    keys = path.split(".")
    chain = [raw]
    for key in keys[:-1]:
        node = chain[-1].get(key)
        if not isinstance(node, dict):
            if value is None:
                return
            node = chain[-1][key] = {}
        chain.append(node)
    if value is None:
        chain[-1].pop(keys[-1], None)
        for depth in range(len(chain) - 1, 0, -1):
            if keys[0] in ("subject", "test") or set(chain[depth]) - _METADATA:
                break
            chain[depth - 1].pop(keys[depth - 1], None)
    else:
        chain[-1][keys[-1]] = value


def _from_trials(raw: Mapping[str, Any], path: str) -> bool:
    """``True`` when the field's block is graded from trials and the field is not reported."""
    block_path, key = path.rsplit(".", 1)
    block = _get(raw, block_path)
    return isinstance(block, Mapping) and bool(block.get("trials")) and key not in block


class CaseForm(widgets.VBox):
    """Form over a case dictionary; calls ``on_change(new_raw)`` after every valid-looking edit.

    Parameters
    ----------
    raw : dict
        The case dictionary to start from (copied).
    on_change : callable
        Receives the edited dictionary; may raise :class:`~pftwork.errors.CaseError`, which is
        then shown beside the field it names.
    """

    def __init__(self, raw: Mapping[str, Any], on_change: Callable[[dict[str, Any]], Any]) -> None:
        self.raw: dict[str, Any] = copy.deepcopy(dict(raw))
        self._on_change = on_change
        self.inputs: dict[str, widgets.Widget] = {}
        self.errors: dict[str, widgets.HTML] = {}
        self.units: dict[str, widgets.HTML] = {}
        self.general_error = widgets.HTML("")
        self.general_error.add_class("pft-error")
        self._loading = False
        rows: list[widgets.Widget] = [widgets.HTML(
            '<div class="pft-meta">Edit a value and press Enter or leave the field: the '
            "worksheet recomputes at once. Units are fixed per field; values graded from "
            "trials are read-only here.</div>")]
        section = ""
        for f in FIELDS:
            if f.section != section:
                section = f.section
                rows.append(widgets.HTML(f'<div class="pft-section-title">{section}</div>'))
            rows.append(self._row(f))
        rows.append(self.general_error)
        super().__init__(rows)
        self.add_class("pft-case-form")
        self.load(self.raw)

    def _row(self, f: FormField) -> widgets.Widget:
        slug = f.path.replace(".", "-")
        if f.kind == "choice":
            box: widgets.Widget = widgets.Dropdown(options=list(f.choices),
                                                   layout=widgets.Layout(width="180px"))
        else:
            box = widgets.Text(continuous_update=False, layout=widgets.Layout(
                width="320px" if f.kind == "text" else "110px"))
        box.add_class(f"pft-field-{slug}")
        box.observe(lambda change, path=f.path: self._on_edit(path, change["new"]), "value")
        label = widgets.HTML(f"{html.escape(f.label)}", layout=widgets.Layout(width="150px"))
        unit = widgets.HTML(html.escape(f.unit), layout=widgets.Layout(width="140px"))
        unit.add_class("pft-unit")
        error = widgets.HTML("")
        error.add_class("pft-field-error")
        self.inputs[f.path], self.errors[f.path], self.units[f.path] = box, error, unit
        return widgets.HBox([label, box, unit, error])

    def load(self, raw: Mapping[str, Any]) -> None:
        """Show ``raw`` in the fields (without triggering ``on_change``)."""
        self.raw = copy.deepcopy(dict(raw))
        self._loading = True
        try:
            for f in FIELDS:
                box, value = self.inputs[f.path], _get(self.raw, f.path)
                locked = _from_trials(self.raw, f.path)
                if f.kind == "choice":
                    box.value = value if value in f.choices else f.choices[0]
                else:
                    box.value = "" if value is None else (f"{value:g}" if isinstance(
                        value, float) else str(value))
                    box.placeholder = "from trials" if locked else ""
                box.disabled = locked
                self.errors[f.path].value = ""
            self._unit_labels()
        finally:
            self._loading = False

    def _unit_labels(self) -> None:
        unit = _get(self.raw, "diffusion.unit") or "SI"
        dl, kco = _DIFFUSION_UNITS.get(unit, ("", ""))
        self.units["diffusion.DLCO"].value = dl
        self.units["diffusion.KCO"].value = kco

    def _on_edit(self, path: str, text: Any) -> None:
        if self._loading:
            return
        for error in self.errors.values():
            error.value = ""
        self.general_error.value = ""
        kind = next(f.kind for f in FIELDS if f.path == path)
        try:
            value = parse_number(text) if kind == "number" else (str(text).strip() or None)
        except ValueError:
            self.errors[path].value = html.escape(f"{text!r} is not a number")
            return
        _set(self.raw, path, value)
        self._unit_labels()
        try:
            self._on_change(dict(self.raw))  # the loader copies what it keeps
        except CaseError as exc:
            target = exc.field if exc.field in self.errors else path
            self.errors[target].value = html.escape(str(exc))
        except PftworkError as exc:
            self.general_error.value = f'<div class="pft-error-text">{html.escape(str(exc))}</div>'

    def set_value(self, path: str, value: Any) -> None:
        """Type ``value`` into the field ``path`` (as a user would; used by tests and scripts)."""
        box = self.inputs[path]
        box.value = value if isinstance(box, widgets.Dropdown) else (
            "" if value is None else str(value))
