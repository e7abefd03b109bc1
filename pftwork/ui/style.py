"""pftwork's own visual language: colours, plot symbols and the worksheet's CSS.

One place for every colour so that the widgets and the plotly figures agree. The palette is
our own (muted clinical teal and ink with a warm contrast colour for post-bronchodilator data);
status colours keep a text contrast ratio above 4.5:1 against their backgrounds.
"""

from __future__ import annotations

from pftwork.zgraphic import COLORS as _ZCOLORS

__all__ = ["COLORS", "CSS", "FONT", "STATUS_COLORS", "SYMBOLS", "css_block"]

FONT = "'Source Sans 3', 'Segoe UI', 'Helvetica Neue', Arial, sans-serif"

COLORS: dict[str, str] = {
    **_ZCOLORS,              # ink, muted, rule, pre (current test), post (post-BD), band, …
    "panel": "#ffffff",
    "page": "#f5f7f9",
    "FEV1": "#0b6e79",
    "FVC": "#3f5fa8",
    "DLCO": "#8e3b76",
    "marker": "#1f2a36",
    "knee": "#a61b1b",
    "caution_bg": "#fff7e0",
    "caution_edge": "#d9a400",
}

#: (text colour, background) per decision status.
STATUS_COLORS: dict[str, tuple[str, str]] = {
    "pending": ("#7a5a00", "#fff3cc"),
    "accepted": ("#17603a", "#e1f2e7"),
    "amended": ("#4f3590", "#ece6f8"),
    "error": ("#9c1818", "#fde8e8"),
    "signed": ("#ffffff", "#17603a"),
}

#: Plotly marker symbols.
SYMBOLS: dict[str, str] = {
    "pre": "circle",
    "post": "diamond-open",
    "PEF": "triangle-up",
    "FEF": "square-open",
    "knee": "x-thin-open",
    "FEV1": "line-ns-open",
}

CSS = f"""
.pft-worksheet {{ font-family: {FONT}; color: {COLORS['ink']}; background: {COLORS['page']};
  padding: 10px 14px; border-radius: 6px; max-width: 1100px; }}
.pft-worksheet .pft-header h2 {{ margin: 0 0 2px 0; font-size: 1.35em; font-weight: 600; }}
.pft-worksheet .pft-header .pft-sub {{ color: {COLORS['muted']}; font-size: 0.92em; }}
.pft-cautions {{ background: {COLORS['caution_bg']}; border-left: 4px solid {COLORS['caution_edge']};
  padding: 6px 10px; font-size: 0.86em; line-height: 1.35; margin: 6px 0; }}
.pft-cautions ul {{ margin: 2px 0 0 0; padding-left: 18px; }}
.pft-panel {{ background: {COLORS['panel']}; border: 1px solid {COLORS['rule']};
  border-radius: 6px; padding: 8px 12px; margin: 8px 0; }}
.pft-panel h3 {{ margin: 0; font-size: 1.08em; font-weight: 600; display: inline; }}
.pft-stepno {{ color: {COLORS['muted']}; font-weight: 600; margin-right: 6px; }}
.pft-chip {{ display: inline-block; padding: 1px 8px; border-radius: 10px; font-size: 0.8em;
  font-weight: 600; margin-left: 8px; vertical-align: 2px; }}
""" + "".join(
    f".pft-chip-{k} {{ color: {fg}; background: {bg}; }}\n" for k, (fg, bg) in STATUS_COLORS.items()
) + f"""
table.pft-evidence {{ border-collapse: collapse; font-size: 0.88em; margin: 6px 0; }}
table.pft-evidence th {{ text-align: right; color: {COLORS['muted']}; font-weight: 600;
  border-bottom: 1px solid {COLORS['rule']}; padding: 2px 8px; }}
table.pft-evidence th:first-child, table.pft-evidence td:first-child {{ text-align: left; }}
table.pft-evidence td {{ text-align: right; padding: 2px 8px; font-variant-numeric: tabular-nums;
  border-bottom: 1px solid #eef2f5; }}
table.pft-evidence td.pft-low {{ color: #9c1818; font-weight: 600; }}
table.pft-evidence td.pft-high {{ color: #4f3590; font-weight: 600; }}
.pft-conclusion {{ border-left: 3px solid {COLORS['pre']}; padding: 4px 10px; margin: 6px 0;
  background: #f2f8f8; font-size: 0.98em; }}
.pft-conclusion.pft-amended {{ border-left-color: {STATUS_COLORS['amended'][0]};
  background: {STATUS_COLORS['amended'][1]}; }}
.pft-original {{ color: {COLORS['muted']}; font-size: 0.88em; margin: 2px 0 6px 13px; }}
.pft-meta {{ color: {COLORS['muted']}; font-size: 0.84em; line-height: 1.4; }}
.pft-meta b {{ color: {COLORS['ink']}; font-weight: 600; }}
.pft-notes {{ font-size: 0.86em; margin: 4px 0; }}
.pft-error-text {{ color: {STATUS_COLORS['error'][0]}; background: {STATUS_COLORS['error'][1]};
  padding: 4px 8px; border-radius: 4px; font-size: 0.88em; }}
table.pft-log td, table.pft-log th {{ text-align: left; }}
.pft-details summary {{ cursor: pointer; color: {COLORS['pre']}; }}
.pft-worksheet .pft-accept:not(:disabled) {{ background: {COLORS['pre']}; color: #ffffff; }}
.pft-worksheet .pft-signoff:not(:disabled) {{ background: {STATUS_COLORS['signed'][1]};
  color: #ffffff; font-weight: 600; }}
.pft-worksheet .pft-amend-save, .pft-worksheet .pft-note-save {{
  background: {STATUS_COLORS['amended'][0]}; color: #ffffff; }}
.pft-banner {{ padding: 8px 12px; border-radius: 6px; font-weight: 600; margin: 6px 0; }}
.pft-banner-signed {{ color: {STATUS_COLORS['signed'][0]}; background: {STATUS_COLORS['signed'][1]}; }}
.pft-banner-open {{ color: {COLORS['muted']}; background: #eef2f5; font-weight: 400; }}
.pft-status-line {{ color: {COLORS['muted']}; font-size: 0.84em; }}
.pft-field-error {{ color: {STATUS_COLORS['error'][0]}; font-size: 0.82em; }}
.pft-section-title {{ font-weight: 600; margin: 10px 0 2px 0; font-size: 1.02em; }}
"""


def css_block() -> str:
    """The worksheet CSS wrapped in a ``<style>`` element (for an ``HTML`` widget)."""
    return f"<style>{CSS}</style>"
