"""The calibrate notebook: upload a freezing assay, see the fit and its uncertainty, save the calibration."""

from __future__ import annotations

import html
import threading

import altair as alt
import ipywidgets as w

from planner.errors import PlannerError
from planner.ui.calibrate_model import CalibrateModel, demo_assays
from planner.ui.style import style_html
from planner.ui.summary import fmt, planning_support_html
from planner.ui.widgets import add_classes, button, dropdown, html_box, text_box


def rate_chart(curve: dict) -> alt.Chart:
    """Fitted rate per mL against supercooling with its 90 % band; the assay's range is shaded."""
    rows = [{"x": x, "y": y, "lo": lo, "hi": hi} for x, y, lo, hi in
            zip(curve["supercooling"], curve["log10_rate"], curve["log10_low"], curve["log10_high"], strict=True)]
    lo, hi = curve["measured"]
    shade = alt.Chart(alt.Data(values=[{"a": lo, "b": hi}])).mark_rect(color="#1f6f43", opacity=0.10).encode(
        x="a:Q", x2="b:Q")
    band = alt.Chart(alt.Data(values=rows)).mark_area(color="#0b5394", opacity=0.25).encode(
        x=alt.X("x:Q", title="supercooling below the assay's liquidus (K)"), y="lo:Q", y2="hi:Q")
    line = alt.Chart(alt.Data(values=rows)).mark_line(color="#1d1d1d", strokeWidth=2).encode(
        x="x:Q", y=alt.Y("y:Q", title="log10 rate per mL (1/(mL s))"))
    return alt.layer(shade, band, line).properties(width=560, height=240,
                                                    title="Fitted rate and its 90 % interval (shaded: the assay's range)")


def fit_chart(rows: list[dict]) -> alt.Chart:
    """Observed against predicted fraction frozen per condition, with the 1:1 line."""
    data = [{"p": r["predicted"], "o": r["observed"], "n": r["samples"], "c": r["condition"]} for r in rows]
    diag = alt.Chart(alt.Data(values=[{"a": 0, "b": 0}, {"a": 1, "b": 1}])).mark_line(
        color="#888", strokeDash=[4, 3]).encode(x="a:Q", y="b:Q")
    pts = alt.Chart(alt.Data(values=data)).mark_point(filled=True, color="#1d1d1d").encode(
        x=alt.X("p:Q", title="predicted fraction frozen", scale=alt.Scale(domain=[0, 1])),
        y=alt.Y("o:Q", title="observed fraction frozen", scale=alt.Scale(domain=[0, 1])),
        size=alt.Size("n:Q", title="samples"))
    return alt.layer(diag, pts).properties(width=320, height=320, title="Observed against predicted")


class CalibrateApp:
    """Upload an assay CSV (or open an invented demo one), fit, look at the fit, save the calibration."""

    def __init__(self, model: CalibrateModel | None = None, inline: bool = False):
        self.model = model or CalibrateModel()
        self.inline = inline
        demos = list(demo_assays())
        self.demo = dropdown("Demo assay", [(d, d) for d in demos] or [("(none)", "")],
                             demos[0] if demos else "", "cm-cal-demo")
        self.open_demo = button("Open demo", "cm-cal-open")
        self.open_demo.on_click(lambda _b: self._load(lambda: self.model.load_demo(self.demo.value)))
        self.upload = w.FileUpload(accept=".csv", multiple=False, description="Upload assay (.csv)",
                                  layout=w.Layout(width="auto"))
        self.upload.observe(self._uploaded, names="value")
        self.fit_button = button("Fit", "cm-cal-fit", "primary")
        self.fit_button.on_click(lambda _b: self._fit())
        self.progress = w.IntProgress(value=0, min=0, max=1, layout=w.Layout(display="none"))
        self.message = html_box("", "cm-cal-message")
        self.assay = html_box("", "cm-cal-assay")
        self.result = html_box("", "cm-cal-result")
        self.folder = text_box("Save in folder", "protocols", "cm-cal-folder")
        self.name = text_box("Calibration name", "my-calibration", "cm-cal-name")
        self.save_button = button("Save calibration", "cm-cal-save")
        self.save_button.on_click(lambda _b: self._save())
        self.saved = html_box("", "cm-cal-saved")
        self.widget = w.VBox([
            html_box(style_html()),
            html_box("<h2>coldmargin: calibrate ice nucleation from your assay</h2><div class='cm-links'>"
                     "<a href='./plan.ipynb'>back to the planner</a></div>"),
            w.HBox([self.demo, self.open_demo, self.upload]), self.message, self.assay,
            w.HBox([self.fit_button, self.progress]), self.result,
            html_box("<h3>Save</h3>"), self.folder, self.name, w.HBox([self.save_button]), self.saved,
            html_box(planning_support_html(None)),
        ])
        add_classes(self.widget, "cm-app cm-calibrate")

    def _say(self, text: str) -> None:
        self.message.value = f"<div class='cm-message'>{html.escape(text)}</div>" if text else ""

    def _load(self, action) -> None:
        try:
            action()
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        a = self.model.assay
        frozen = sum(s.frozen for s in a.samples)
        self.assay.value = (f"<p>{html.escape(a.name)}: {len(a.samples)} samples, {frozen} frozen; liquidus "
                            f"{fmt(a.liquidus - 273.15)} °C; medium: {html.escape(a.medium or 'not stated')}.</p>")
        self.result.value = self.saved.value = ""

    def _uploaded(self, change) -> None:
        files = change["new"]
        if files:
            self._load(lambda: self.model.load_text(files[0]["name"], bytes(files[0]["content"])))

    def _fit(self) -> None:
        self.fit_button.disabled = True
        self.progress.layout.display = ""
        self.progress.value = 0
        self.result.value = "<p class='cm-working-note'>Fitting…</p>"

        def run():
            from planner.ui.svg import chart_html

            try:
                cal = self.model.fit()
                rows = "".join(f"<tr><td>{html.escape(k)}</td><td>{html.escape(v)}</td></tr>" for k, v in self.model.summary())
                flags = "".join(f"<li><b>{html.escape(f.code)}</b>: {html.escape(f.message)}</li>" for f in cal.flags)
                text = (f"<table class='cm-table cm-cal-summary'>{rows}</table>"
                        + (f"<ul class='cm-flags'>{flags}</ul>" if flags else "")
                        + chart_html(rate_chart(self.model.curve())))
                if cal.goodness_of_fit:
                    text += chart_html(fit_chart(cal.goodness_of_fit))
                self.result.value = text
            except PlannerError as exc:
                self.result.value = f"<p class='cm-message'>{html.escape(str(exc))}</p>"
            except Exception as exc:  # shown as a message, never as a traceback
                self.result.value = f"<p class='cm-message'>{html.escape(type(exc).__name__)}: {html.escape(str(exc))}</p>"
            finally:
                self.progress.value = 1
                self.progress.layout.display = "none"
                self.fit_button.disabled = False

        if self.inline:
            run()
        else:
            threading.Thread(target=run, daemon=True).start()

    def _save(self) -> None:
        try:
            path = self.model.save(self.folder.value, self.name.value)
        except PlannerError as exc:
            self.saved.value = f"<p class='cm-message'>{html.escape(str(exc))}</p>"
            return
        self.saved.value = (f"<p>Saved <code class='cm-cal-path'>{html.escape(str(path))}</code>. Use it in a plan: "
                            f"<code>nucleation: {{calibration: {html.escape(path.name)}}}</code> (relative to the "
                            "protocol file's folder).</p>")

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)
