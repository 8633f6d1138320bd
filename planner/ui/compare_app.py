"""The compare notebook: two to four scenarios side by side, made to be projected."""

from __future__ import annotations

import html
import os

import ipywidgets as w

from planner.errors import PlannerError
from planner.ui.compare_model import LETTERS, MAX_SCENARIOS, QUICK_FIELDS, CompareModel
from planner.ui.draft import format_entry
from planner.ui.fields import label_for
from planner.ui.planner_model import demo_files
from planner.ui.style import style_html
from planner.ui.summary import planning_support_html, state_badge
from planner.ui.widgets import add_classes, button, dropdown, error_html, html_box, text_box
from planner.ui.work import Worker

CHOICES = {"container": ("open", "rigid"), "interface": ("exposed", "sealed")}


class ScenarioColumn:
    """The quick fields of one scenario (the numbers a lab meeting changes)."""

    def __init__(self, app: CompareApp, index: int):
        self.app, self.index = app, index
        model = app.model.scenarios[index]
        self.title = html_box(f"<h3>{html.escape(app.model.names[index])}</h3>", "cm-scenario-title")
        self.inputs: list[tuple[str, w.Widget, w.HTML]] = []
        children: list[w.Widget] = [self.title]
        for name, label, finder in QUICK_FIELDS:
            path = finder(model)
            if path is None:
                continue
            css = f"cm-q-{name} cm-q-{LETTERS[index]}-{name}"
            full = f"{label} – {LETTERS[index]}"
            if name == "concentration":
                full = f"{label_for(path)} of {model.value('solution.cryoprotectants[0].agent')} – {LETTERS[index]}"
            value = model.value(path)
            if name in CHOICES:
                opts = list(CHOICES[name]) + ([str(value)] if value is not None and str(value) not in CHOICES[name] else [])
                box = dropdown(full, [("(not given)", "")] + [(o, o) for o in opts], "" if value is None else str(value), css)
            else:
                box = text_box(full, format_entry(value), css)
            box.layout.width = "30em"
            box.style.description_width = "15em"
            err = html_box("")
            box.observe(lambda ch, p=path, n=name: self._typed(p, n, ch["new"]), names="value")
            self.inputs.append((path, box, err))
            children += [box, err]
        remove = button(f"Remove {LETTERS[index]}", f"cm-remove-scenario cm-remove-{LETTERS[index]}")
        remove.on_click(lambda _b: app.remove(index))
        children.append(remove)
        self.box = w.VBox(children)
        add_classes(self.box, f"cm-scenario cm-scenario-{LETTERS[index]}")

    def _typed(self, path: str, name: str, value) -> None:
        if name in CHOICES:
            value = value or None
        self.app.model.set_value(self.index, path, value)

    def refresh(self) -> None:
        m = self.app.model.scenarios[self.index]
        for path, _box, err in self.inputs:
            err.value = error_html(m.error_for(path))
        extra = [msg for p, msg in m.field_errors.items() if p not in {i[0] for i in self.inputs}]
        if m.message:
            extra.append(m.message)
        self.title.value = (f"<h3>{html.escape(self.app.model.names[self.index])}</h3>"
                            + "".join(error_html(x) for x in extra))


class CompareApp:
    """Two to four scenarios side by side: margins with states, overlaid charts, the freeze map.

    Parameters
    ----------
    demos : list of str, optional
        Demo protocols to start with (default: ``?scenario=…`` in the address, else the first demo twice).
    """

    def __init__(self, demos: list[str] | None = None, model: CompareModel | None = None, inline: bool = False):
        # built in line (no page is connected while the notebook runs); threads from the first change on
        threaded_later = model is None and not inline
        self.model = model or CompareModel(demos, inline=True if threaded_later else inline)
        inline = self.model.inline
        self.chart_worker = Worker(inline=inline)
        self.map_worker = Worker(inline=inline)
        self.table = html_box("", "cm-compare-table")
        self.charts = html_box("", "cm-compare-charts")
        self.map = html_box("", "cm-compare-map")
        self.map_progress = w.IntProgress(value=0, min=0, max=2, description="Map")
        self.map_progress.layout.display = "none"
        self.map_progress.add_class("cm-map-progress")
        self.columns_box = w.HBox()
        self.columns_box.add_class("cm-columns")  # side by side always (rows of tools may wrap)
        self.columns: list[ScenarioColumn] = []
        demos_known = list(demo_files())
        self.add_choice = dropdown("Add scenario", [("copy of A", "copy")] + [(f"demo: {d}", d) for d in demos_known],
                                   "copy", "cm-add-scenario-choice")
        self.add_button = button("Add", "cm-add-scenario", "primary")
        self.add_button.on_click(lambda _b: self._add())
        self.upload = w.FileUpload(accept=".yaml,.yml", multiple=False, description="Add from file",
                                  layout=w.Layout(width="auto"))
        self.upload.observe(self._uploaded, names="value")
        self.large = w.ToggleButton(value=os.environ.get("COLDMARGIN_LARGE_TYPE") == "1", description="Large type",
                                    layout=w.Layout(width="auto"))
        self.large.add_class("cm-large-toggle")
        self.large.observe(lambda ch: self._large(ch["new"]), names="value")
        self.message = html_box("", "cm-compare-message")
        self.widget = w.VBox([
            html_box(style_html()),
            html_box("<h2>coldmargin: compare scenarios</h2><div class='cm-links'>"
                     "<a href='./plan.ipynb'>back to the planner</a></div>"),
            w.HBox([self.add_choice, self.add_button, self.upload, self.large]), self.message,
            self.columns_box,
            html_box("<h3>Margins</h3>"), self.table,
            html_box("<h3>Histories</h3>"), self.charts,
            html_box("<h3>Freeze probability over volume and hold temperature</h3>"), self.map_progress, self.map,
            html_box(planning_support_html(None)),
        ])
        add_classes(self.widget, "cm-app cm-compare")
        self._large(self.large.value)
        self._build_columns()
        self.model.observe(lambda _ch: self.refresh(), names="revision")
        self.refresh()
        if threaded_later:
            self.model.inline = False
            for m in self.model.scenarios:
                m.worker = Worker(inline=False)
            self.chart_worker, self.map_worker = Worker(inline=False), Worker(inline=False)

    def _large(self, on: bool) -> None:
        (self.widget.add_class if on else self.widget.remove_class)("cm-large")

    def _say(self, text: str) -> None:
        self.message.value = f"<div class='cm-message'>{html.escape(text)}</div>" if text else ""

    def _build_columns(self) -> None:
        self.columns = [ScenarioColumn(self, i) for i in range(len(self.model.scenarios))]
        self.columns_box.children = [c.box for c in self.columns]
        self.add_button.disabled = len(self.model.scenarios) >= MAX_SCENARIOS

    def _add(self) -> None:
        try:
            if self.add_choice.value == "copy":
                self.model.duplicate(0)
            else:
                self.model.add_demo(self.add_choice.value)
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self._build_columns()
        self.refresh()

    def _uploaded(self, change) -> None:
        files = change["new"]
        if not files:
            return
        try:
            self.model.add_upload(files[0]["name"], bytes(files[0]["content"]))
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._build_columns()
        self.refresh()

    def remove(self, index: int) -> None:
        try:
            self.model.remove(index)
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self._build_columns()
        self.refresh()

    def refresh(self) -> None:
        for c in self.columns:
            c.refresh()
        self.table.value = compare_table_html(*self.model.margins_table())
        self._draw()

    def _draw(self) -> None:
        from planner.ui.stepcharts_data import snapshot
        from planner.ui.svg import note_html

        snaps = [snapshot(m) for m in self.model.scenarios]
        labels = list(self.model.names)

        def charts() -> str:
            from planner.ui.stepcharts import overlay_chart, overlay_data
            from planner.ui.svg import chart_html

            series = [d for d in (overlay_data(s, lbl) for s, lbl in zip(snaps, labels, strict=True)) if d]
            if not series:
                return note_html("No histories yet: no scenario has a valid assessment.")
            return chart_html(overlay_chart(series))

        self.chart_worker.submit(charts, lambda text: setattr(self.charts, "value", text),
                                 lambda exc: setattr(self.charts, "value", note_html(f"No chart ({exc}).")))
        self.map_progress.layout.display = ""
        self.map_progress.value = 0

        def drawn_map() -> str:
            from planner.ui.mapchart import freeze_map_chart
            from planner.ui.maps import freeze_map
            from planner.ui.svg import chart_html

            usable = [(s.protocol, s.assessment) for s in snaps if s.assessment is not None]
            letters = [lbl.split(":", 1)[0] for s, lbl in zip(snaps, labels, strict=True) if s.assessment is not None]
            if not usable:
                return note_html("No map yet: no scenario has a valid assessment.")
            result = freeze_map(usable, labels=letters)
            self.map_progress.value = 1
            if result is None:
                return note_html("No map: the nucleation model is not installed.")
            volumes, temps, grid, marks, note = result
            own = []
            for s, lbl in zip(snaps, labels, strict=True):
                p = ((s.report or {}).get("nucleation") or {}).get("freeze_probability")
                if p is not None:
                    own.append(f"{lbl}: {p:.3g} with its own nucleation model and schedule")
            if own:
                note += " Each scenario's own freeze probability – " + "; ".join(own) + "."
            return chart_html(freeze_map_chart(volumes, temps, grid, marks=marks)) + note_html(note)

        def shown(text: str) -> None:
            self.map.value = text
            self.map_progress.value = 2
            self.map_progress.layout.display = "none"

        self.map_worker.submit(drawn_map, shown, lambda exc: shown(note_html(f"No map ({exc}).")))

    def wait(self) -> None:
        self.model.wait()
        self.chart_worker.wait()
        self.map_worker.wait()

    def _repr_mimebundle_(self, **kwargs):
        return self.widget._repr_mimebundle_(**kwargs)


def compare_table_html(names: list[str], rows) -> str:
    head = "<tr><th>Margin</th>" + "".join(f"<th>{html.escape(n)}</th>" for n in names) + "</tr>"
    body = "".join(
        f"<tr><td>{html.escape(label)}</td>"
        + "".join(f"<td>{html.escape(c.value_text)} {state_badge(c.state)}</td>" for c in cells) + "</tr>"
        for label, cells in rows
    )
    return f"<table class='cm-table cm-compare-margins'>{head}{body}</table>"
