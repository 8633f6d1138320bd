"""The planner in the browser: app classes for the notebooks, and the widget-free models behind them.

Notebooks import one class and display it::

    from planner.ui import PlannerApp
    PlannerApp()

Each app keeps its state in a plain model object (``PlannerModel``, ``CompareModel``, ``CalibrateModel``,
``ArchiveModel``) that tests drive without a browser; the widgets only bind to it.
"""

from __future__ import annotations

import sys
from importlib import import_module
from typing import Any

# jsonschema (under altair) imports rfc3987_syntax, when installed, only to check the "iri" string format;
# building that package's grammars takes 1.5 s on an idle core and over 10 s on a busy one, on every kernel
# start. Chart specifications never use that format, so the app's kernel goes without it (jsonschema
# skips the check when the import fails). Nothing else in the kernel validates IRIs.
if "jsonschema" not in sys.modules:
    sys.modules.setdefault("rfc3987_syntax", None)

_WHERE = {
    "PlannerApp": "planner.ui.planner_app",
    "PlannerModel": "planner.ui.planner_model",
    "CompareApp": "planner.ui.compare_app",
    "CompareModel": "planner.ui.compare_model",
    "CalibrateApp": "planner.ui.calibrate_app",
    "CalibrateModel": "planner.ui.calibrate_model",
    "ArchiveApp": "planner.ui.archive_app",
    "ArchiveModel": "planner.ui.archive_model",
}

__all__ = sorted(_WHERE)


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        return getattr(import_module(_WHERE[name]), name)
    raise AttributeError(f"module 'planner.ui' has no attribute {name!r}")
