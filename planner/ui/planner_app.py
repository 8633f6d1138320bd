"""The plan notebook's widgets, bound to a :class:`~planner.ui.planner_model.PlannerModel`.

The view holds no state of its own beyond widgets: every input writes into the model's draft, and every
assessment the model reports is drawn from the model. Steps, fields, rows and charts come from the
registry in :mod:`planner.ui.steps`.
"""

from __future__ import annotations

import html
import os
import threading
from typing import Any

import ipywidgets as w

from planner.errors import PlannerError
from planner.ui import steps as registry
from planner.ui.draft import Draft, format_entry
from planner.ui.fields import css_name, hint_for, label_for
from planner.ui.planner_model import PROTOCOL_ENV, PlannerModel, demo_files
from planner.ui.style import style_html
from planner.ui.summary import (
    planning_support_html,
    section_html,
    strip_html,
)
from planner.ui.widgets import (
    PageShown,
    add_classes,
    button,
    download_link,
    dropdown,
    error_html,
    html_box,
    text_box,
)
from planner.ui.work import Worker

NONE_WORD = "(not given)"


class Superseded(Exception):
    """A chart not drawn because a newer result is on its way."""

UPDATING = '<div class="cm-working-note cm-chart-updating">Updating the chart for the latest result…</div>'


class FieldView:
    """One input bound to one key path of the draft, with its error shown under it."""

    def __init__(self, app: PlannerApp, spec: registry.Field, path: str):
        self.app, self.spec, self.path = app, spec, path
        model = app.model
        label = label_for(path)
        css = "cm-field " + css_name(path)
        value = model.value(path)
        if spec.kind == "choice":
            words = list(spec.options())
            if value is not None and str(value) not in words:
                words.append(str(value))  # a value the list does not know is kept, and the loader judges it
            options = [(NONE_WORD, "")] + [(word, word) for word in words]
            self.input = dropdown(label, options, "" if value is None else str(value), css)
        else:
            self.input = text_box(label, format_entry(value), css, long=spec.kind == "longtext")
        hint = hint_for(path)
        if hint:
            self.input.tooltip = hint
        self.error = html_box("", "cm-field-error-box")
        self.box = w.VBox([self.input, self.error])
        self.input.observe(self._typed, names="value")

    def _typed(self, change) -> None:
        if self.app.syncing:
            return
        value = change["new"]
        if self.spec.kind == "choice":
            value = value or None
        self.app.edit(lambda: self.app.model.set_value(self.path, value))

    def refresh_value(self) -> None:
        value = self.app.model.value(self.path)
        if self.spec.kind == "choice":
            text = "" if value is None else str(value)
            if text not in [v for _, v in self.input.options]:
                self.input.options = [*self.input.options, (text, text)]
            self.input.value = text
        else:
            self.input.value = format_entry(value)

    def refresh_state(self) -> None:
        model = self.app.model
        shown = self.spec.shown is None or self.spec.shown(model.draft)
        self.box.layout.display = "" if shown or model.value(self.path) is not None else "none"
        message = model.error_for(self.path)
        self.error.value = error_html(message)
        if message:
            self.input.add_class("cm-field-bad")
        else:
            self.input.remove_class("cm-field-bad")


class RowsView:
    """A list of rows (cryoprotectants, schedule steps) with add, remove and move buttons."""

    def __init__(self, app: PlannerApp, spec: registry.Rows):
        self.app, self.spec = app, spec
        self.box = w.VBox()
        add_classes(self.box, "cm-rows " + css_name(spec.path))
        self.fields: list[FieldView] = []
        self.row_errors: list[tuple[str, w.HTML]] = []
        self.build()

    def build(self) -> None:
        model = self.app.model
        rows = model.value(self.spec.path) or []
        self.fields = []
        self.row_errors = []
        children: list[w.Widget] = [html_box(f"<h4>{html.escape(self.spec.title)}</h4>")]
        for i, row in enumerate(rows):
            row_path = f"{self.spec.path}[{i}]"
            kind = self.spec.kind_of(row)
            title = f"{i + 1}. {kind.name if kind else 'row'}"
            parts: list[w.Widget] = [html_box(f'<span class="cm-row-title">{html.escape(title)}</span>')]
            for f in registry.row_fields(self.spec, row):
                fv = FieldView(self.app, f, f"{row_path}.{f.path}")
                self.fields.append(fv)
                parts.append(fv.box)
            if self.spec.unit_keys:
                current = model.unit_of_row(row_path) or self.spec.unit_keys[0]
                unit = dropdown("Concentration unit",
                                [(registry.CONCENTRATION_WORDS.get(u, u), u) for u in self.spec.unit_keys],
                                current, "cm-unit " + css_name(row_path + ".unit"))
                unit.observe(lambda ch, p=row_path: self._unit(p, ch["new"]), names="value")
                parts.insert(2, unit)
                key = model.unit_of_row(row_path)
                if key is not None:
                    fv = FieldView(self.app, registry.Field(key), f"{row_path}.{key}")
                    self.fields.append(fv)
                    parts.insert(3, fv.box)
            remove = button("Remove", "cm-remove " + css_name(row_path + ".remove"))
            remove.on_click(lambda _b, p=row_path: self.app.edit(lambda: self._remove(p)))
            up = button("Move up", "cm-up " + css_name(row_path + ".up"))
            up.on_click(lambda _b, p=row_path: self.app.edit(lambda: self._move(p, -1)))
            parts.append(w.HBox([up, remove]))
            err = html_box("")
            self.row_errors.append((row_path, err))
            parts.append(err)
            row_box = w.VBox(parts)
            row_box.add_class("cm-row")
            children.append(row_box)
        if len(self.spec.kinds) > 1:
            self.new_kind = dropdown("New step", [(k.name, k.name) for k in self.spec.kinds],
                                     self.spec.kinds[0].name, "cm-new-kind " + css_name(self.spec.path + ".new"))
            add = button("Add step", "cm-add " + css_name(self.spec.path + ".add"))
            add.on_click(lambda _b: self.app.edit(lambda: self._add(self.new_kind.value)))
            children.append(w.HBox([self.new_kind, add]))
        else:
            add = button(f"Add {self.spec.kinds[0].name}", "cm-add " + css_name(self.spec.path + ".add"))
            add.on_click(lambda _b: self.app.edit(lambda: self._add(None)))
            children.append(w.HBox([add]))  # its own width, not the page's
        self.box.children = children
        self.refresh_state()

    def _add(self, kind: str | None) -> None:
        self.app.model.add_row(self.spec.path, kind)
        self.build()

    def _remove(self, row_path: str) -> None:
        self.app.model.remove_row(row_path)
        self.build()

    def _move(self, row_path: str, offset: int) -> None:
        self.app.model.move_row(row_path, offset)
        self.build()

    def _unit(self, row_path: str, unit_key: str) -> None:
        if self.app.syncing:
            return
        self.app.edit(lambda: self.app.model.set_unit(row_path, unit_key))
        self.build()

    def refresh_state(self) -> None:
        for fv in self.fields:
            fv.refresh_state()
        shown_paths = {fv.path for fv in self.fields}
        for row_path, err in self.row_errors:
            messages = [m for p, m in self.app.model.field_errors.items()
                        if (p == row_path or p.startswith(row_path + ".")) and p not in shown_paths]
            err.value = "".join(error_html(m) for m in messages)
        list_errors = [m for p, m in self.app.model.field_errors.items() if p == self.spec.path]
        if list_errors and self.row_errors:
            self.row_errors[-1][1].value += "".join(error_html(m) for m in list_errors)


class StepView:
    """One form step: intro, fields and rows, the section's key numbers and the step's chart."""

    def __init__(self, app: PlannerApp, spec: registry.StepSpec):
        self.app, self.spec = app, spec
        self.fields: list[FieldView] = []
        self.rows: list[RowsView] = []
        self.numbers = html_box("", "cm-numbers")
        self.chart = html_box("", "cm-chart-box cm-chart-" + spec.name)
        self.chart_revision = -1
        self.chart_evaluation = None  # the result the chart on show was drawn from
        self.chart_worker = Worker(inline=app.model.worker.inline)
        self.include: w.Checkbox | None = None
        self.inputs = w.VBox()
        parts: list[w.Widget] = [
            html_box(f"<h3>{html.escape(spec.title)}</h3><p class='cm-intro'>{html.escape(spec.intro)}</p>")
        ]
        if spec.optional_path:
            self.include = w.Checkbox(value=app.model.draft.has(spec.optional_path),
                                      description=f"Include {spec.title.lower()} in this protocol", indent=False)
            self.include.add_class("cm-include-" + spec.name)
            self.include.observe(self._include, names="value")
            self.include_note = html_box("", "cm-include-note")
            parts += [self.include, self.include_note]
        parts.append(self.inputs)
        self.build_inputs()
        self.box = w.VBox([*parts, self.numbers, self.chart])
        add_classes(self.box, "cm-step cm-step-" + spec.name)

    def build_inputs(self) -> None:
        self.fields, self.rows = [], []
        children = []
        included = self.spec.optional_path is None or self.app.model.draft.has(self.spec.optional_path)
        if included:
            for item in self.spec.items:
                if isinstance(item, registry.Rows):
                    rv = RowsView(self.app, item)
                    self.rows.append(rv)
                    children.append(rv.box)
                else:
                    fv = FieldView(self.app, item, item.path)
                    self.fields.append(fv)
                    children.append(fv.box)
        self.inputs.children = children

    def _include(self, change) -> None:
        if self.app.syncing:
            return
        self.app.edit(lambda: self.app.model.include(self.spec.optional_path, bool(change["new"])))
        self.build_inputs()
        self.refresh_state()

    def refresh_values(self) -> None:
        if self.include is not None:
            self.include.value = self.app.model.draft.has(self.spec.optional_path)
        self.build_inputs()

    def _add_fields_for_errors(self) -> None:
        """A key the loader asks for that this step has no box for (a permeability for a newly added agent,
        say) gets a box of its own, labelled from the key, under the step's inputs."""
        model = self.app.model
        have = {fv.path for fv in self.fields} | {fv.path for rv in self.rows for fv in rv.fields}
        row_paths = {rv.spec.path for rv in self.rows}
        added = False
        for path in model.field_errors:
            if path in have or model.step_of_error(path) != self.spec.name:
                continue
            if any(path == r or path.startswith(r + "[") for r in row_paths) or path.endswith("]"):
                continue  # rows show their own errors
            value = model.value(path)
            if isinstance(value, (dict, list)):
                continue
            from planner.ui.steps import _numberish

            fv = FieldView(self.app, registry.Field(path, "number" if _numberish(path) else "text"), path)
            self.fields.append(fv)
            self.inputs.children = (*self.inputs.children, fv.box)
            added = True
        if added:
            for fv in self.fields:
                fv.refresh_state()

    def refresh_state(self) -> None:
        self._add_fields_for_errors()
        if self.spec.optional_path:
            # ticked but nothing given yet: the block is not in the protocol until a value is (say so)
            model = self.app.model
            block = model.draft.get(self.spec.optional_path) if model.draft.has(self.spec.optional_path) else None
            empty = block is not None and not any(v is not None for _, v in Draft(block).leaves())
            self.include_note.value = (
                f"<p class='cm-working-note'>Nothing is given for the {html.escape(self.spec.title.lower())} yet: "
                "choose a preset or enter values below; until then the protocol has no such block and nothing "
                "about it is worked out.</p>" if empty and isinstance(block, dict) else "")
        for fv in self.fields:
            fv.refresh_state()
        for rv in self.rows:
            rv.refresh_state()
        report = self.app.model.report
        parts = []
        for name in self.spec.sections:
            if report and isinstance(report.get(name), dict):
                parts.append(section_html(name, registry.SECTION_TITLES.get(name, name), report[name]))
        self.numbers.value = "".join(parts)

    def shows(self, message: str) -> bool:
        """True when a box or row of this step shows ``message`` (as its error, escaped)."""
        text = html.escape(message)
        boxes = [fv.error.value for fv in self.fields] + [fv.error.value for rv in self.rows for fv in rv.fields]
        rows = [err.value for rv in self.rows for _, err in rv.row_errors]
        return any(text in value for value in boxes + rows)

    def refresh_chart(self) -> None:
        """Draw the step's chart on its own worker (the summary strip never waits for a chart)."""
        model = self.app.model
        if self.spec.chart is None or self.chart_revision == model.result_revision:
            return
        if self.app.charts_held:
            return  # drawn once the page is up (PlannerApp.release_charts)
        from planner.ui.stepcharts_data import snapshot, with_stale_note

        revision = model.result_revision
        self.chart_revision = revision
        evaluation = model.evaluation
        if evaluation is not None and evaluation is self.chart_evaluation:
            # a refused edit leaves the last valid result in place: the chart only gains or loses its stale note
            self.chart.value = with_stale_note(self.chart.value, bool(model.stale))
            return
        snap = snapshot(model)
        if model.evaluation is not None:
            # the chart on show belongs to the previous result until the new one is drawn: say so
            shown = self.chart.value.split(UPDATING, 1)[-1]
            self.chart.value = UPDATING + shown if shown else '<div class="cm-chart cm-working-note">Drawing the chart…</div>'

        def lost(exc: BaseException) -> None:
            self.chart_revision = -1
            self.chart_evaluation = None

        def drawn(text: str) -> None:
            self.chart.value = text
            self.chart_evaluation = evaluation

        def draw() -> str:
            if model.working:
                # a newer assessment is running: its own chart follows, and drawing this one now would only
                # slow it down (both need the interpreter)
                raise Superseded
            from planner.ui.charting import chart_for_step  # any chart library loads on this thread

            return chart_for_step(self.spec.chart, snap)

        self.chart_worker.submit(draw, drawn, lost)


class StepViews(dict):
    """The form steps' views, each built the first time it is asked for.

    A page starts with the first step's widgets only: every widget is a model the kernel sends and the
    browser builds before the page can be used, and building all five form steps up front made about 560
    of them (ten viewers at once: 5600 on one machine). A step never shown costs nothing; a step once
    built is kept, so nothing typed in it is lost when moving on. ``values()`` and iteration cover the
    steps built so far.
    """

    def __init__(self, app: PlannerApp):
        super().__init__()
        self.app = app

    def __missing__(self, name: str) -> StepView:
        spec = registry.step(name)
        if spec.kind != "form":
            raise KeyError(name)
        app = self.app
        was = app.syncing
        app.syncing = True
        try:
            view = StepView(app, spec)
        finally:
            app.syncing = was
        self[name] = view  # its chart worker follows the model's (threads once the page is up)
        view.refresh_state()
        return view


WARM_UP_AFTER_S = 0.5


def _warm_charts() -> None:
    try:
        import planner.ui.stepcharts  # noqa: F401  (altair and the step charts)
        from planner.ui.svg import warm_up

        warm_up()
    except Exception:  # a failed warm-up only means the first chart is slower
        pass


class PlannerApp:
    """The planner in steps: Sample → Container → Solution → Schedule → Cells → Review → Sign & archive.

    Parameters
    ----------
    protocol : str or path, optional
        A protocol file to start from; default ``$COLDMARGIN_PROTOCOL``, else the first demo.
    model : PlannerModel, optional
        The state to show (tests pass one with a stand-in assessment).
    inline : bool
        Assess in the calling thread instead of the worker thread.
    """

    def __init__(self, protocol: str | os.PathLike | None = None, model: PlannerModel | None = None,
                 inline: bool = False):
        # While the notebook runs no page is connected yet (always so in a pre-started kernel, and often
        # with many viewers at once). The app is built and assessed in line; the worker threads take over
        # afterwards, when every update answers a person's input on a connected page.
        # In a kernel voila starts (for one page's request, or pre-started), the first chart (altair's
        # import and the SVG engine's start, ~1 s) waits until a page says it has shown the app, so the
        # page opens that much sooner; a pre-started kernel warms the engine meanwhile.
        threaded_later = model is None and not inline
        self.model = model or PlannerModel(inline=True if threaded_later else inline)
        self.charts_held = threaded_later and os.environ.get("VOILA_PREHEAT") in ("False", "True")
        self.syncing = False
        self._confirm: str | None = None
        self._lock = threading.RLock()
        self.message = html_box("", "cm-app-message")
        self._build_header()
        self.strip = html_box("", "cm-summary")
        self.step_views: StepViews = StepViews(self)
        self.body = w.VBox()
        self.body.add_class("cm-body")
        self._build_nav()
        self._review = None  # the review and sign views are built when first shown (see StepViews)
        self._sign = None
        self.planning = html_box(planning_support_html(None), "cm-planning-box")
        self.widget = w.VBox([html_box(style_html()), self.header, self.nav, self.strip, self.message, self.body,
                              self.planning])
        self.widget.add_class("cm-app")
        self.model.observe(self._on_result, names="result_revision")
        self.model.observe(self._on_working, names="working")
        self.model.observe(self._on_step, names="step")
        start = protocol or os.environ.get(PROTOCOL_ENV)
        try:
            if start:
                self.model.load_path(start)
            elif demo_files():
                self.model.load_demo(next(iter(demo_files())))
            else:
                self.model.start_blank()
        except PlannerError as exc:
            self.model.start_blank()
            self._say(f"Could not open {start}: {exc}")
        self._match_start_choice()
        self._rebuild_steps()
        self._show_step()
        self._on_result(None)
        if os.environ.get("COLDMARGIN_LARGE_TYPE") == "1":
            self.large.value = True
        if threaded_later:
            self.model.worker = Worker(inline=False)
            for view in self.step_views.values():
                view.chart_worker = Worker(inline=False)
        if self.charts_held:
            self.page_shown = PageShown()
            self.page_shown.observe(lambda change: self.release_charts(), names="shown")
            self.widget.children = (*self.widget.children, self.page_shown)
        if self.charts_held and os.environ.get("VOILA_PREHEAT") == "True":
            # a pre-started kernel warms the chart engine once the notebook's output is out, so the chart
            # follows a page at once. It touches no widget. A kernel started for a waiting page does not:
            # the engine holds the interpreter ~0.6 s, which there delays the page by as much.
            warm = threading.Timer(WARM_UP_AFTER_S, _warm_charts)
            warm.daemon = True
            warm.start()

    def release_charts(self) -> None:
        """Draw charts from now on (the page is up); the current step's chart is drawn at once."""
        if not self.charts_held:
            return
        self.charts_held = False
        current = self.step_views.get(self.model.step)
        if current is not None:
            current.refresh_chart()

    @property
    def review(self):
        """The review step's view (built on first use)."""
        if self._review is None:
            from planner.ui.review import ReviewView

            self._review = ReviewView(self)
        return self._review

    @property
    def sign(self):
        """The sign & archive step's view (built on first use)."""
        if self._sign is None:
            from planner.ui.review import SignView

            self._sign = SignView(self)
        return self._sign

    # --- building ------------------------------------------------------------------------------------

    def _build_header(self) -> None:
        demos = list(demo_files())
        options = [(f"demo: {d}", f"demo:{d}") for d in demos] + [("blank protocol", "blank")]
        self.start_choice = dropdown("Start from", options, options[0][1], "cm-start")
        self.open_button = button("Open", "cm-open", "primary")
        self.open_button.on_click(lambda _b: self._open_start())
        self.upload = w.FileUpload(accept=".yaml,.yml", multiple=False, description="Upload protocol",
                                  layout=w.Layout(width="auto"))
        self.upload.add_class("cm-upload")
        self.upload.observe(self._uploaded, names="value")
        self.download = html_box("", "cm-download-box")
        self.large = w.ToggleButton(value=False, description="Large type", tooltip="larger text for a projector",
                                    layout=w.Layout(width="auto"))
        self.large.add_class("cm-large-toggle")
        self.large.observe(self._large, names="value")
        links = html_box(
            '<div class="cm-links">Other views: <a href="./compare.ipynb" target="_blank">compare scenarios</a>'
            '<a href="./calibrate.ipynb" target="_blank">calibrate nucleation</a>'
            '<a href="./archive.ipynb" target="_blank">archive</a></div>', "cm-links-box")
        title = html_box("<h2>coldmargin: plan a cold-preservation protocol</h2>")
        self.header = w.VBox([
            title,
            w.HBox([self.start_choice, self.open_button]),
            w.HBox([self.upload, self.download, self.large]),
            links,
        ])
        self.header.add_class("cm-header")

    def _build_nav(self) -> None:
        names = registry.step_names()
        titles = [registry.step(n).title for n in names]
        self.steps_bar = w.ToggleButtons(options=list(zip(titles, names, strict=True)), value=self.model.step,
                                         style={"button_width": "auto"})
        self.steps_bar.add_class("cm-steps")
        self.steps_bar.observe(lambda ch: None if self.syncing else self.model.go(ch["new"]), names="value")
        self.back_button = button("Back", "cm-back")
        self.next_button = button("Next", "cm-next", "primary")
        self.back_button.on_click(lambda _b: self.model.back())
        self.next_button.on_click(lambda _b: self.model.next())
        self.nav = w.VBox([self.steps_bar, w.HBox([self.back_button, self.next_button])])
        self.nav.add_class("cm-nav")

    def _rebuild_steps(self) -> None:
        self.syncing = True
        try:
            # steps already built take the new values; the others are built from the model when shown
            for view in list(self.step_views.values()):
                view.refresh_values()
        finally:
            self.syncing = False

    # --- events --------------------------------------------------------------------------------------

    def edit(self, action) -> None:
        """Run an edit; a refused edit (e.g. too few rows) is said in the message line, nothing changes."""
        self.release_charts()  # a person's edit means the page is up, even if its signal never came
        try:
            action()
        except PlannerError as exc:
            self._say(str(exc))

    def _say(self, text: str) -> None:
        self.message.value = f'<div class="cm-message">{html.escape(text)}</div>' if text else ""

    def _open_start(self) -> None:
        choice = self.start_choice.value
        if self.model.edited and self._confirm != choice:
            self._confirm = choice
            self._say("The protocol has changes that would be replaced. Download it first to keep them, "
                      "or click Open again to replace it.")
            return
        self._confirm = None
        try:
            if choice == "blank":
                self.model.start_blank()
            else:
                self.model.load_demo(choice.split(":", 1)[1])
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self._rebuild_steps()
        self._refresh()

    def _match_start_choice(self) -> None:
        wanted = f"demo:{self.model.source_name}"
        if wanted in [v for _, v in self.start_choice.options]:
            self.start_choice.value = wanted

    def _uploaded(self, change) -> None:
        files = change["new"]
        if not files:
            return
        f = files[0]
        try:
            self.model.load_upload(f["name"], bytes(f["content"]))
        except PlannerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self._rebuild_steps()
        self._refresh()

    def _large(self, change) -> None:
        if change["new"]:
            self.widget.add_class("cm-large")
        else:
            self.widget.remove_class("cm-large")

    def _on_step(self, change) -> None:
        self.release_charts()
        self._show_step()

    def _on_working(self, change) -> None:
        if self.model.working:
            self._draw_strip()

    def _on_result(self, change) -> None:
        with self._lock:
            self._refresh()

    def _refresh(self) -> None:
        self._draw_strip()
        for view in self.step_views.values():
            view.refresh_state()
        current = self.step_views.get(self.model.step)
        if current is not None:
            current.refresh_chart()
        if self._review is not None:
            self.review.refresh()
        if self._sign is not None:
            self.sign.refresh()
        self.planning.value = planning_support_html(self.model.report)
        self.download.value = download_link(self.model.download_name(), self.model.protocol_yaml().encode("utf-8"),
                                            "Download protocol (YAML)", "text/yaml")
        self._say(self._general_message())

    def _general_message(self) -> str:
        """The message line: the model's own message, a refusal that belongs to another step, or a refusal
        of this step that no box or row of it shows (said here, so a refusal is never only in the model)."""
        for p, m in self.model.field_errors.items():
            step = self.model.step_of_error(p)
            if step not in (None, self.model.step):
                return f"On step {registry.step(step).title}: {m}"
            view = self.step_views.get(self.model.step)
            if step == self.model.step and view is not None and not view.shows(m):
                return m
        return self.model.message

    def _draw_strip(self) -> None:
        verdict = self.model.verdict()[0] if self.model.report else None
        self.strip.value = strip_html(self.model.margins(), verdict, self.model.stale, self.model.working)

    def _show_step(self) -> None:
        name = self.model.step
        self.syncing = True
        try:
            self.steps_bar.value = name
        finally:
            self.syncing = False
        names = registry.step_names()
        self.back_button.disabled = names.index(name) == 0
        self.next_button.disabled = names.index(name) == len(names) - 1
        spec = registry.step(name)
        if spec.kind == "review":
            self.body.children = [self.review.box]
            self.review.refresh()
        elif spec.kind == "sign":
            self.body.children = [self.sign.box]
            self.sign.refresh()
        else:
            view = self.step_views[name]
            self.body.children = [view.box]
            view.refresh_chart()
        self._refresh_message_only()

    def _refresh_message_only(self) -> None:
        self._say(self._general_message())

    def _repr_mimebundle_(self, **kwargs) -> Any:
        return self.widget._repr_mimebundle_(**kwargs)

