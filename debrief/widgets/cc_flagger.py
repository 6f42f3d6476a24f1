"""Continuing-current suspects of the window, with the rule thresholds as editable controls.

Every change of a threshold or of the window recomputes through
:func:`debrief.continuing_current.flag_continuing_current` on the window's strokes and flashes
(a flash's flag depends only on its own strokes, and the window keeps whole flashes). Picking a
flash in the list selects it in the shared state; the map zooms to it.
"""

from __future__ import annotations

import html

import ipywidgets as W
import pandas as pd

from ..config import schema
from .state import ExploreState, ensure_state

RULE_KEYS = ("positive_min_ka", "negative_max_abs_ka", "min_interval_ms")


def reason_text() -> dict:
    """``{code: explanation}`` from :data:`debrief.continuing_current.REASONS`."""
    from ..continuing_current import REASONS

    return {str(k): str(v["explanation"]) for k, v in REASONS.items()}


def flash_line(row) -> str:
    """One line of the suspect list: id, UTC time, polarity, |kA|, strokes, reasons."""
    t = pd.Timestamp(row.time).tz_convert("UTC").strftime("%H:%M:%S.%f")[:-3]
    sign = "+" if row.polarity == "positive" else "−"
    n = int(row.multiplicity)
    return (f"flash {int(row.flash_id)}  {t}Z  {sign}{float(row.max_abs_peak_ka):.0f} kA  "
            f"{n} stroke{'s' if n != 1 else ''}  [{row.cc_reasons}]")


class CCFlagger(W.VBox):
    """The window's continuing-current suspects; thresholds editable; pick one to select it."""

    def __init__(self, event_or_state, *, rows: int = 10):
        self.state: ExploreState = ensure_state(event_or_state)
        spec = schema()["continuing_current"]
        self.controls = {}
        for key in RULE_KEYS:
            k = spec[key]
            unit = "kA" if key.endswith("_ka") else "ms"
            self.controls[key] = W.BoundedFloatText(
                value=float(self.state.cc_rules.get(key, k.default)), min=float(k.min or 0.0), max=1e6, step=1.0,
                description=key.replace("_", " ").replace(" ka", "").replace(" ms", "") + f" ({unit})",
                tooltip=k.doc, style={"description_width": "170px"}, layout=W.Layout(width="290px"))
            self.controls[key].observe(self._on_rule, names="value")
        self.reset = W.Button(description="event settings", tooltip="back to the thresholds of event.toml",
                              layout=W.Layout(width="130px"))
        self.reset.on_click(self._on_reset)
        self.list = W.Select(options=[], rows=rows, layout=W.Layout(width="100%"))
        self.list.add_class("debrief-cc-list")
        self.list.observe(self._on_pick, names="value")
        self.summary = W.HTML()
        self.legend = W.HTML(self._legend_html())
        self.flagged = pd.DataFrame()
        self.state.observe(self._recompute, names=["window", "cc_rules"])
        super().__init__([W.HBox(list(self.controls.values())), self.reset, self.summary, self.list, self.legend])
        self._recompute()

    @staticmethod
    def _legend_html() -> str:
        from ..continuing_current import CAUTIONS

        rows = "".join(f"<li><code>{html.escape(k)}</code>: {html.escape(v)}</li>" for k, v in reason_text().items())
        cautions = "".join(f"<li>{html.escape(c)}</li>" for c in CAUTIONS)
        return (f"<small>Reason codes<ul style='margin:2px 0'>{rows}</ul>"
                f"Cautions<ul style='margin:2px 0'>{cautions}</ul></small>")

    def rules(self) -> dict:
        """The thresholds the controls show, as ``flag_continuing_current`` keywords."""
        return {k: float(c.value) for k, c in self.controls.items()}

    def _on_rule(self, change=None):
        self.state.cc_rules = self.rules()

    def _on_reset(self, _=None):
        defaults = dict(self.state.event.config["continuing_current"])
        for k, c in self.controls.items():
            c.unobserve(self._on_rule, names="value")
            c.value = float(defaults[k])
            c.observe(self._on_rule, names="value")
        self.state.cc_rules = self.rules()

    def compute(self) -> pd.DataFrame:
        """The window's flashes as :func:`flag_continuing_current` flags them under `rules()`."""
        from ..continuing_current import flag_continuing_current

        strokes, flashes = self.state.window_tables()
        return flag_continuing_current(strokes, flashes, self.state.event.config, **self.rules())

    def _recompute(self, change=None):
        flagged = self.compute()
        self.flagged = flagged[flagged["cc_suspect"].astype(bool).to_numpy()].reset_index(drop=True)
        opts = [(flash_line(r), int(r.flash_id)) for r in self.flagged.itertuples()]
        self.list.unobserve(self._on_pick, names="value")
        try:
            self.list.options = opts
            keep = [v for _, v in opts if v in self.state.selected_flash_ids]
            self.list.value = keep[0] if keep else None
        finally:
            self.list.observe(self._on_pick, names="value")
        n_all = len(flagged)
        self.summary.value = (f"<b>{len(self.flagged):,} suspected continuing-current flashes</b> of {n_all:,} "
                              "flashes in the window")

    def flagged_ids(self) -> list[int]:
        return [int(v) for v in self.flagged["flash_id"]] if len(self.flagged) else []

    def _on_pick(self, change):
        if change["new"] is not None:
            self.state.select(flash_ids=(int(change["new"]),))
