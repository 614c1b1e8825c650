"""The planner's look: one small style sheet, shown once as an HTML widget."""

from __future__ import annotations

import ipywidgets as w

__all__ = ["CSS", "style_widget"]

CSS = """
.cs-app { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #222;
          max-width: 1500px; }
.cs-app .widget-html-content { line-height: 1.35; }
.cs-caution { position: sticky; top: 0; z-index: 20; background: #fff5f5;
              border-left: 5px solid #b00020; padding: 6px 12px; font-size: 13px;
              box-shadow: 0 1px 3px rgba(0,0,0,0.08); }
.cs-figure { width: 100%; contain: layout style; }
.cs-title { font-size: 20px; font-weight: 600; margin: 8px 0 0 0; }
.cs-subtitle { color: #555; font-size: 13px; margin: 2px 0 4px 0; }
.cs-section { font-size: 15px; font-weight: 600; margin: 10px 0 4px 0; color: #333; }
.cs-panel-title { font-size: 14px; font-weight: 600; margin: 2px 0 6px 0; color: #333; }
.cs-label { font-size: 13px; }
.cs-unit { color: #6b6b6b; font-size: 12px; font-weight: normal; }
.cs-note { color: #555; font-size: 12px; margin-top: 6px; max-width: 440px; }
.cs-th { display: block; font-size: 12px; font-weight: 600; line-height: 1.2;
         text-align: center; }
.cs-step-no { display: block; text-align: center; font-weight: 600; color: #555; }
.cs-plan-table .widget-text input, .cs-plan-table select { text-align: right; }
.cs-plan-table .cs-col-note input { text-align: left; }
.cs-invalid input, .cs-invalid select { border: 2px solid #c00020 !important;
                                        background: #fff0f0 !important; }
.cs-card { border: 1px solid #ddd; border-radius: 6px; padding: 8px 10px; background: #fff; }
.cs-alert { border-left: 4px solid #999; padding: 4px 8px; margin: 3px 0; font-size: 13px;
            background: #f7f7f7; }
.cs-alert.cs-danger { border-color: #c00020; background: #fff0f0; }
.cs-alert.cs-warning { border-color: #e08a00; background: #fff7e6; }
.cs-alert.cs-caution { border-color: #3a6fb0; background: #f0f5fc; }
.cs-alert.cs-none { border-color: #3a8f3a; background: #f2faf2; }
.cs-badge { display: inline-block; font-size: 11px; font-weight: 700; text-transform: uppercase;
            letter-spacing: 0.03em; color: #444; }
.cs-error { border: 2px solid #c00020; background: #fff0f0; padding: 6px 10px; font-size: 13px;
            border-radius: 4px; margin: 4px 0; }
.cs-saved { color: #1d6b1d; font-size: 13px; margin: 4px 0; }
.cs-status { color: #6b6b6b; font-size: 12px; }
.cs-table { border-collapse: collapse; font-size: 13px; margin: 2px 0; }
.cs-table th, .cs-table td { border-bottom: 1px solid #e3e3e3; padding: 3px 8px;
                             text-align: right; }
.cs-table th { font-weight: 600; background: #f6f6f6; }
.cs-table th:first-child, .cs-table td:first-child { text-align: left; }
.cs-advise { border-color: #3a6fb0; background: #fbfcfe; }
.cs-advise-caution { border-left: 4px solid #3a6fb0; background: #f0f5fc; padding: 4px 8px;
                     font-size: 13px; margin: 0 0 6px 0; }
.cs-advise-line { font-size: 13px; margin: 2px 0; }
.cs-busy { color: #3a6fb0; font-weight: 600; }
/* one screen: plan and results on the left, the figure beside them */
.cs-app { max-width: none; }
.cs-caution { padding: 4px 10px; font-size: 12px; }
.cs-title { font-size: 17px; margin: 4px 0 0 0; }
.cs-subtitle { margin: 0 0 2px 0; }
.cs-main { width: 100%; }
.cs-left, .cs-right { overflow: hidden; }
.cs-main-tabs .lm-TabBar-tab, .cs-main-tabs .p-TabBar-tab { font-size: 13px; }
.cs-main-tabs > .widget-tab-contents, .cs-main-tabs > .lm-TabPanel-stackedPanel {
    padding: 6px 6px; overflow-x: auto; }
.cs-warnings-card { max-height: 210px; overflow-y: auto; }
.cs-alert { padding: 3px 8px; margin: 2px 0; }
.cs-section { margin: 2px 0 4px 0; }
.cs-band-panel .widget-hbox { margin: 2px 0; }
"""


def style_widget() -> w.HTML:
    """An HTML widget carrying the style sheet (Voilà and JupyterLab both apply it)."""
    return w.HTML(f"<style>{CSS}</style>", layout=w.Layout(display="none"))
