"""Everything with I/O around the statistics core: sockets, pipeline, summaries, commands.

Public names are loaded on first use (PEP 562), as in ``stats``: importing ``eddyvigil.monitor.cli``
loads neither numpy nor its BLAS, so the command can settle the BLAS thread count first.
"""

from eddyvigil.stats.lazy import lazy_exports

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


__getattr__, __dir__ = lazy_exports(globals(), _WHERE)
