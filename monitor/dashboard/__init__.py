"""The live dashboard: the only package in eddyvigil that imports Bokeh."""

from eddyvigil.monitor.dashboard.server import DashboardServer, PortInUseError, serve

__all__ = ["serve", "DashboardServer", "PortInUseError"]
