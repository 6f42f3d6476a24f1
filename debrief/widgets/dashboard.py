"""The explore dashboard: every widget on one shared state, with the cautions of the trade."""

from __future__ import annotations

import html

import ipywidgets as W

from .cc_flagger import CCFlagger
from .controls import FilterBar, TimeWindow
from .histogram import PolarityHistogram
from .multiplicity import MultiplicityTable
from .state import ExploreState, ensure_state
from .stroke_map import StrokeMap

CAUTIONS = (
    "<div class='debrief-cautions' style='font-size:12px;border-left:4px solid #999;padding:4px 10px;"
    "margin:4px 0;background:#f7f7f7'><b>Read with care.</b> This is a record of what a lightning location "
    "network reported, not a warning. The network misses some flashes and strokes (detection efficiency{de}) "
    "and places each stroke only within its error ellipse, so counts are lower bounds and positions are "
    "estimates. Conclusions about cause, damage or safety need qualified people and defer to local codes "
    "and licensed practice.</div>"
)


def cautions_html(event) -> str:
    """The dashboard's caution note, with the event's detection efficiency when it is known."""
    de = event.config.get("flash_detection_efficiency")
    src = event.config.get("flash_detection_efficiency_source")
    txt = "" if de is None else f"; this event: {de:.0%} of flashes" + (f", {html.escape(src)}" if src else "")
    return CAUTIONS.format(de=txt)


class Dashboard(W.VBox):
    """Map, time window, filters, histogram, multiplicity, continuing current and site check.

    Parameters
    ----------
    event_or_state : Event or ExploreState
    tile_url : str, optional
        Tile URL for the map (default none: no network request).
    sites : bool
        Include the site panel (needs :mod:`debrief.sites`).
    """

    def __init__(self, event_or_state, *, tile_url: str | None = None, width_min: int = 30, sites: bool = True):
        self.state: ExploreState = ensure_state(event_or_state)
        ev = self.state.event
        self.time = TimeWindow(self.state, width_min=width_min)
        self.filters = FilterBar(self.state)
        self.map = StrokeMap(self.state, tile_url=tile_url)
        self.histogram = PolarityHistogram(self.state)
        self.multiplicity = MultiplicityTable(self.state)
        self.cc = CCFlagger(self.state)
        tabs = [self.cc]
        titles = ["continuing current"]
        self.site_panel = None
        if sites:
            try:
                from .site_panel import SitePanel

                self.site_panel = SitePanel(self.state)
                tabs.append(self.site_panel)
                titles.append("site check")
            except ImportError:
                self.site_panel = None
        self.tabs = W.Tab(children=tabs, titles=titles)
        ledger = getattr(ev.ledger, "one_line", None)
        head = f"<h3 style='margin:4px 0'>{html.escape(ev.name)}</h3>"
        if callable(ledger):
            head += f"<div style='font-size:12px'>{html.escape(ledger())}</div>"
        self.clear_selection = W.Button(description="clear selection", layout=W.Layout(width="130px"))
        self.clear_selection.on_click(lambda _: self.state.select())
        self.selection_label = W.HTML()
        self.state.observe(self._on_selection, names=["selected_flash_ids", "selected_stroke_ids"])
        self._on_selection()
        right = W.VBox([W.HTML("<b>|peak current| in the window</b>"), self.histogram,
                        W.HTML("<b>strokes per flash</b>"), self.multiplicity],
                       layout=W.Layout(flex="2 1 0%", min_width="380px"))
        left = W.VBox([self.map], layout=W.Layout(flex="3 1 0%", min_width="420px"))
        super().__init__([W.HTML(head), W.HTML(cautions_html(ev)), self.filters,
                          W.HBox([self.time, W.VBox([self.clear_selection, self.selection_label])]), W.HBox([left, right], layout=W.Layout(width="100%")),
                          self.tabs])
        self.add_class("debrief-dashboard")

    def _on_selection(self, change=None):
        nf, ns = len(self.state.selected_flash_ids), len(self.state.selected_stroke_ids)
        parts = [f"{nf:,} flash{'es' if nf != 1 else ''}"] if nf else []
        parts += [f"{ns:,} stroke{'s' if ns != 1 else ''}"] if ns else []
        self.selection_label.value = f"<small>selected: {', '.join(parts) if parts else 'nothing'}</small>"

    @classmethod
    def from_folder(cls, event_dir, **kwargs) -> "Dashboard":
        """Load the event folder (:func:`debrief.event.load_event`) and build the dashboard."""
        from ..event import load_event

        return cls(load_event(event_dir), **kwargs)

    def show(self) -> None:
        """Display the dashboard in the notebook."""
        from IPython.display import display

        display(self)
