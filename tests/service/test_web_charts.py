"""The station chart is a self-contained SVG that shows its series, floor and outages."""

import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

import numpy as np

from app.web.charts import Series, _with_breaks, omega_week_svg

T0 = datetime(2026, 6, 1, tzinfo=UTC)
SVG_NS = "{http://www.w3.org/2000/svg}"


def test_chart_is_svg_with_labels_and_no_external_references():
    times = [T0 + timedelta(minutes=15 * k) for k in range(96 * 7)]
    values = [1.2 + 0.4 * np.sin(k / 12) for k in range(len(times))]
    svg = omega_week_svg(
        title="Intake north",
        in_situ=Series("in situ", times, values),
        at_tank_temperature=[Series("at 25 °C", times, [x + 0.5 for x in values])],
        floors=[("floor 1.5", 1.5)],
        start=T0, end=T0 + timedelta(days=7), timezone="America/Los_Angeles",
    )
    root = ET.fromstring(svg.encode())
    assert root.tag == SVG_NS + "svg"
    texts = " ".join(t.text or "" for t in root.iter(SVG_NS + "text"))
    for label in ("Intake north", "in situ", "at 25 °C", "floor 1.5"):
        assert label in texts
    assert "http://" not in svg.replace("http://www.w3.org", "").replace(
        "http://purl.org", "").replace("http://creativecommons.org", "").replace(
        "http://matplotlib.org", "")


def test_outages_break_the_line():
    # Samples at 0, 10 and 70 min: the 60-min spacing exceeds the 30-min limit, so a NaN is
    # put in between and the line is not drawn across the outage.
    times = [T0, T0 + timedelta(minutes=10), T0 + timedelta(minutes=70)]
    t, v = _with_breaks(Series("x", times, [1.0, 2.0, 3.0]), timedelta(minutes=30))
    assert t.size == 4
    assert np.isnan(v[2]) and list(v[[0, 1, 3]]) == [1.0, 2.0, 3.0]


def test_long_titles_wrap_and_type_stays_large_for_a_phone_card():
    """A station card is about 320 px wide on a 390 px phone; the figure is drawn about that
    wide, so its smallest type (in SVG units) is close to what the phone shows."""
    import re

    times = [T0 + timedelta(minutes=15 * k) for k in range(96 * 7)]
    title = "Bay intake, after the sand filter: omega aragonite, last 7 days"
    svg = omega_week_svg(
        title=title,
        in_situ=Series("in situ", times, [1.4] * len(times)),
        at_tank_temperature=[Series("at tank temperature 25 °C", times, [2.0] * len(times))],
        floors=[("tank floor 1.5", 1.5)],
        start=T0, end=T0 + timedelta(days=7), timezone="UTC",
    )
    root = ET.fromstring(svg.encode())
    texts = [t.text or "" for t in root.iter(SVG_NS + "text")]
    # The title is there in full, over two lines, none longer than the line limit.
    title_lines = [t for t in texts if t and t in title]
    assert " ".join(title_lines) == title and len(title_lines) == 2
    view_width = float(root.get("viewBox").split()[2])
    assert view_width <= 330
    sizes = [float(s) for s in re.findall(r"font-size: ([\d.]+)px", svg)]
    assert min(sizes) >= 9.5
