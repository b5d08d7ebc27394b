"""Everything with I/O around the statistics core: sockets, pipeline, summaries, commands.

Public names are loaded on first use (PEP 562), as in ``stats``: importing ``monitor.cli``
loads neither numpy nor its BLAS, so the command can settle the BLAS thread count first.
"""

from importlib import import_module

__all__ = [
    "ControlPublisher",
    "Pipeline",
    "RunSnapshot",
    "StreamView",
    "Subscriber",
    "SubscriberError",
    "SummaryWriter",
]

_WHERE = {
    "ControlPublisher": "monitor.control",
    "Pipeline": "monitor.pipeline",
    "RunSnapshot": "monitor.state",
    "StreamView": "monitor.state",
    "Subscriber": "monitor.subscriber",
    "SubscriberError": "monitor.subscriber",
    "SummaryWriter": "monitor.summary",
}


def __getattr__(name):
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'monitor' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
