"""One browser tab of the dashboard: figures, data sources and ONE periodic callback.

Runs once per session; it only *reads* ``get_snapshot()`` (never starts acquisition) and turns
the snapshot into columns with the pure functions of :mod:`monitor.dashboard.views`.
"""

from __future__ import annotations

from collections.abc import Callable

from bokeh.document import Document
from bokeh.layouts import column
from bokeh.models import Div

from monitor.dashboard import views
from monitor.state import RunSnapshot

__all__ = ["build_document", "TICK_MS"]

#: The page's one periodic callback (ms): about four updates a second.
TICK_MS = 250


def build_document(doc: Document, *, get_snapshot: Callable[[], RunSnapshot],
                   title: str = "eddyvigil") -> None:
    """Fill ``doc`` with the dashboard and register its periodic update."""
    doc.title = title
    status = Div(name="status", text=views.status_html(get_snapshot()))

    def tick() -> None:
        text = views.status_html(get_snapshot())
        if text != status.text:
            status.text = text

    doc.add_root(column(status, name="root"))
    doc.add_periodic_callback(tick, TICK_MS)
