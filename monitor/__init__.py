"""Everything with I/O around the statistics core: sockets, pipeline, summaries, commands."""

from monitor.control import ControlPublisher
from monitor.pipeline import Pipeline
from monitor.state import RunSnapshot, StreamView
from monitor.subscriber import Subscriber, SubscriberError
from monitor.summary import SummaryWriter

__all__ = [
    "ControlPublisher",
    "Pipeline",
    "RunSnapshot",
    "StreamView",
    "Subscriber",
    "SubscriberError",
    "SummaryWriter",
]
