"""The incident report: template notebooks executed with parameters as data, exported to ONE
self-contained HTML file (:func:`render_report`). The building blocks the templates display are
in :mod:`debrief.report.content`.

The renderer is imported on first use, so a report kernel that only needs ``content`` does not
pay for nbformat/nbconvert.
"""

__all__ = ["ReportError", "build_notebook", "choose_sections", "render_report", "templates_dir"]


def __getattr__(name):
    if name in __all__:
        from . import render

        return getattr(render, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
