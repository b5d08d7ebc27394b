"""Everything with I/O around the statistics core: sockets, pipeline, summaries, commands.

Public names are loaded on first use (PEP 562), as in ``stats``: importing ``eddyvigil.monitor.cli``
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
    "ControlPublisher": "eddyvigil.monitor.control",
    "Pipeline": "eddyvigil.monitor.pipeline",
    "RunSnapshot": "eddyvigil.monitor.state",
    "StreamView": "eddyvigil.monitor.state",
    "Subscriber": "eddyvigil.monitor.subscriber",
    "SubscriberError": "eddyvigil.monitor.subscriber",
    "SummaryWriter": "eddyvigil.monitor.summary",
}


def __getattr__(name):
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'eddyvigil.monitor' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
