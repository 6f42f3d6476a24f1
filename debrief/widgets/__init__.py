"""Jupyter widgets for exploring an event: they show what the core functions compute.

All widgets share one :class:`ExploreState` (event, time window, selection, filters); each can
also be used alone with an event. No analysis happens here.
"""

from .cc_flagger import CCFlagger
from .controls import FilterBar, TimeWindow
from .dashboard import Dashboard
from .histogram import PolarityHistogram
from .multiplicity import MultiplicityTable
from .state import ExploreState
from .stroke_map import StrokeMap

__all__ = ["CCFlagger", "Dashboard", "ExploreState", "FilterBar", "MultiplicityTable", "PolarityHistogram",
           "SitePanel", "StrokeMap", "TimeWindow"]


def __getattr__(name):
    if name == "SitePanel":  # needs debrief.sites
        from .site_panel import SitePanel

        return SitePanel
    raise AttributeError(name)
