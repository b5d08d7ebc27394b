"""Pure functions from a :class:`monitor.state.RunSnapshot` to what the page shows.

No Bokeh here: everything returns plain dicts of lists/arrays or HTML strings, so it is tested
without a server. Text that came over the wire (stream names, point ids, notes) is always
HTML-escaped before it is put into markup.
"""

from __future__ import annotations

import html

from monitor.state import RunSnapshot

__all__ = ["status_html"]


def status_html(snapshot: RunSnapshot) -> str:
    """A one-line overview of the run: how many streams, which snapshot."""
    names = ", ".join(html.escape(s) for s in snapshot.streams) or "none yet"
    return f"<div>snapshot {snapshot.sequence}; streams: {names}</div>"
