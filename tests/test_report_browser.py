"""The report in a real browser, offline: nothing fetched, no console error, every figure drawn,
a full-page screenshot and a PDF print saved to test-artifacts/ for a person to look at."""

from __future__ import annotations

import pytest

from debrief.report import render_report

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def report_file(tmp_path_factory, example_event):
    out = tmp_path_factory.mktemp("browser") / "report.html"
    render_report(example_event, out)
    return out


def test_report_opens_offline_and_prints(report_file, offline_page, artifacts):
    page = offline_page.page
    page.goto(report_file.as_uri(), wait_until="load")
    page.wait_for_timeout(300)
    assert offline_page.blocked == [], offline_page.blocked  # no request left this machine
    assert offline_page.console_errors == []

    sizes = page.eval_on_selector_all(
        "figure.debrief-figure img, svg",
        "els => els.map(e => { const r = e.getBoundingClientRect(); "
        "return [r.width, r.height, e.tagName, e.complete === undefined ? true : e.complete, e.naturalWidth || 1]; })")
    figs = [s for s in sizes if s[2].lower() == "img"]
    assert len(figs) >= 4
    for w, h, tag, complete, natural in sizes:
        assert w > 0 and h > 0, (tag, w, h)
        assert complete and natural > 0  # the image decoded (a broken data URI has natural size 0)

    # Nothing runs in the report: no script element at all.
    assert page.eval_on_selector_all("script", "els => els.length") == 0
    # One section per page on paper: the print CSS asks for a break before each section.
    breaks = page.evaluate(
        "() => { const out = []; for (const sh of document.styleSheets) { for (const r of sh.cssRules) {"
        " if (r.media && r.media.mediaText.includes('print')) out.push(r.cssText); } } return out.join(' '); }")
    assert "debrief-section-start" in breaks and "break-before: page" in breaks

    page.screenshot(path=str(artifacts / "report.png"), full_page=True)
    page.emulate_media(media="print")
    pdf = page.pdf(path=str(artifacts / "report.pdf"), format="A4", print_background=True)
    assert pdf[:5] == b"%PDF-"
    # Several sections, each starting a page: more pages than sections.
    assert pdf.count(b"/Type /Page") - pdf.count(b"/Type /Pages") >= 4
