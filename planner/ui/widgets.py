"""Small widget helpers shared by the app views (ipywidgets only here; models stay widget-free)."""

from __future__ import annotations

import base64
import html

import anywidget
import ipywidgets as w
import traitlets

LABEL_WIDTH = "17em"


def add_classes(widget: w.Widget, css: str) -> w.Widget:
    """Add each space-separated class (a DOM class name cannot hold a space)."""
    for name in css.split():
        widget.add_class(name)
    return widget


def text_box(label: str, value: str, css: str, long: bool = False, password: bool = False) -> w.Widget:
    """A labelled text input; the label is linked to the input (found by label in a browser)."""
    cls = w.Password if password else (w.Textarea if long else w.Text)
    box = cls(value=value, description=label, continuous_update=False,
              style={"description_width": LABEL_WIDTH}, layout=w.Layout(width="38em"))
    add_classes(box, css)
    return box


def dropdown(label: str, options: list[tuple[str, str]], value: str, css: str) -> w.Dropdown:
    dd = w.Dropdown(options=options, value=value, description=label,
                    style={"description_width": LABEL_WIDTH}, layout=w.Layout(width="38em"))
    add_classes(dd, css)
    return dd


def button(text: str, css: str, style: str = "", tooltip: str = "") -> w.Button:
    b = w.Button(description=text, button_style=style, tooltip=tooltip or text,
                 layout=w.Layout(width="auto"))
    add_classes(b, css)
    return b


def html_box(value: str = "", css: str = "") -> w.HTML:
    h = w.HTML(value=value)
    if css:
        add_classes(h, css)
    return h


def download_link(filename: str, data: bytes, text: str, mime: str) -> str:
    """An HTML link that downloads ``data`` from the page itself (no server round trip)."""
    b64 = base64.b64encode(data).decode("ascii")
    return (f'<a class="cm-download" download="{html.escape(filename)}" '
            f'href="data:{mime};base64,{b64}">{html.escape(text)}</a>')


def error_html(message: str | None) -> str:
    return f'<div class="cm-field-error">{html.escape(message)}</div>' if message else ""



class PageShown(anywidget.AnyWidget):
    """A hidden widget whose ``shown`` turns true once a page has rendered it: the page is up.

    The app holds back work that would only delay the page's first showing (see PlannerApp).
    """

    _esm = ("function render({ model, el }) { el.style.display = 'none';"
            " if (!model.get('shown')) { model.set('shown', true); model.save_changes(); } }"
            " export default { render };")
    shown = traitlets.Bool(False).tag(sync=True)
