"""The app's look: one style sheet, calm colours, readable on a projector; a large-type variant.

States never rely on colour alone: each badge carries a word and a mark (see ``summary.STATE_STYLE``).
"""

from __future__ import annotations

CSS = """
.cm-app { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; font-size: 15px; color: #1d1d1d;
  max-width: 1180px; }
.cm-app.cm-large { font-size: 21px; }
.cm-app.cm-large .widget-label, .cm-app.cm-large input, .cm-app.cm-large select, .cm-app.cm-large textarea,
.cm-app.cm-large button, .cm-app.cm-large .widget-html-content { font-size: 21px !important; }
.cm-app.cm-large .widget-text, .cm-app.cm-large .widget-dropdown { height: auto; }
.cm-app.cm-large input, .cm-app.cm-large select { height: 34px !important; }
.cm-app h2 { font-size: 1.5em; margin: 0.2em 0; font-weight: 600; }
.cm-app h3 { font-size: 1.2em; margin: 0.6em 0 0.3em 0; font-weight: 600; }
.cm-app h4 { font-size: 1.05em; margin: 0.4em 0 0.2em 0; font-weight: 600; }
/* long labels wrap instead of ending in "...": a label names its unit, and a cut unit is a wrong number */
.cm-app .widget-text, .cm-app .widget-dropdown { height: auto; min-height: var(--jp-widgets-inline-height, 28px); }
.cm-app .widget-text .widget-label, .cm-app .widget-dropdown .widget-label { white-space: normal; overflow: visible; text-overflow: clip;
  line-height: 1.2; height: auto; align-self: center; }
.cm-app .widget-dropdown > select { height: var(--jp-widgets-inline-height, 28px); align-self: center; }
/* in large type a row of tools wraps rather than squeezing its buttons into "Lar..." */
.cm-app .widget-hbox:not(.cm-columns) { flex-wrap: wrap; }
.cm-app button { flex-shrink: 0; }
.cm-muted { color: #555; }
.cm-intro { color: #333; margin: 0.2em 0 0.6em 0; max-width: 60em; }
.cm-strip { display: flex; flex-wrap: wrap; gap: 8px; padding: 8px; border: 1px solid #c9ced6;
  border-radius: 6px; background: #f6f8fa; }
.cm-strip.cm-stale { background: repeating-linear-gradient(135deg, #f1f1f1, #f1f1f1 10px, #e4e4e4 10px, #e4e4e4 20px);
  border-style: dashed; border-color: #777; }
.cm-strip.cm-stale .cm-strip-value { color: #666; }
.cm-strip-item { min-width: 12em; padding: 4px 8px; background: #fff; border: 1px solid #dde1e6; border-radius: 4px; }
.cm-strip-label { font-size: 0.85em; color: #444; }
.cm-strip-value { font-size: 1.15em; font-weight: 600; }
.cm-stale-note { margin-top: 4px; font-weight: 600; color: #5a3d00; }
.cm-working-note { margin-top: 4px; color: #333; }
.cm-state { display: inline-block; border: 2px solid; border-radius: 4px; padding: 0 6px; font-weight: 600;
  background: #fff; white-space: nowrap; }
.cm-field-error { color: #a1241b; font-weight: 600; margin: 0 0 6px 0; white-space: normal; }
.cm-field-bad input, .cm-field-bad select { border: 2px solid #a1241b !important; }
.cm-message { color: #a1241b; font-weight: 600; }
.cm-table { border-collapse: collapse; margin: 4px 0; }
.cm-table td, .cm-table th { border-bottom: 1px solid #dde1e6; padding: 3px 10px 3px 0; text-align: left;
  vertical-align: top; }
.cm-caution { border-left: 5px solid #8a5a00; background: #fffaf0; padding: 6px 10px; margin: 6px 0; }
.cm-caution-planning-support { border-left-color: #444; background: #f4f4f4; }
.cm-planning-support { border: 1px solid #888; background: #f4f4f4; padding: 6px 10px; margin: 8px 0;
  font-size: 0.95em; }
.cm-source { color: #555; font-size: 0.85em; }
.cm-row { border: 1px solid #dde1e6; border-radius: 4px; padding: 4px 6px; margin: 4px 0; }
.cm-row-title { font-weight: 600; }
.cm-chart svg { max-width: 100%; height: auto; }
/* projected: charts grow with the page (their SVG keeps its viewBox), so their labels grow with the text */
.cm-app.cm-large .cm-chart svg { width: 100%; }
.cm-nav .widget-toggle-button, .cm-nav button { font-weight: 600; }
.cm-links a { margin-right: 1.2em; }
.cm-scenario { min-width: 0; flex: 1 1 0; padding-right: 8px; }
.cm-scenario .widget-text, .cm-scenario .widget-dropdown { width: 100% !important; }
/* three or four columns leave no room for a label beside its box: the label goes above, the box takes the
   column's width, so "open" never shows as "ope" */
.cm-scenario .widget-text, .cm-scenario .widget-dropdown { flex-direction: column; align-items: stretch; }
.cm-scenario .widget-text .widget-label, .cm-scenario .widget-dropdown .widget-label { width: auto !important;
  text-align: left; align-self: flex-start; max-width: 100%; }
.cm-scenario .widget-text > input, .cm-scenario .widget-dropdown > select { width: 100%; flex: 0 0 auto; }
.cm-record { border: 1px solid #1f6f43; padding: 6px 10px; background: #f3faf5; }
.cm-verify-ok { color: #1f6f43; font-weight: 600; }
.cm-verify-bad { color: #a1241b; font-weight: 600; }
"""


def style_html() -> str:
    return f"<style>{CSS}</style>"
