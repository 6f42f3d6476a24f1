"""The project's colours: one colour-blind-safe palette used by figures, widgets and reports.

The hues are chosen from the Okabe-Ito set (Okabe & Ito 2008, "Color Universal Design"), which
stays distinguishable under the common colour-vision deficiencies. Polarity is carried by hue
(blue negative, vermilion positive) and type by lightness and marker (ground strokes dark and
filled, cloud pulses light and hollow), so no meaning rests on red versus green.
"""

NEGATIVE_CG = "#0072B2"   # blue
POSITIVE_CG = "#D55E00"   # vermilion
NEGATIVE_IC = "#56B4E9"   # sky blue
POSITIVE_IC = "#E69F00"   # orange
SITE = "#009E73"          # bluish green
LINE = "#333333"          # near black
ELLIPSE = "#CC79A7"       # reddish purple
HIGHLIGHT = "#F0E442"     # yellow, for selection outlines
GRID = "#D9D9D9"
BACKGROUND = "#FFFFFF"

STROKE_COLOURS = {
    ("CG", "negative"): NEGATIVE_CG,
    ("CG", "positive"): POSITIVE_CG,
    ("IC", "negative"): NEGATIVE_IC,
    ("IC", "positive"): POSITIVE_IC,
}

STROKE_LABELS = {
    ("CG", "negative"): "negative ground stroke",
    ("CG", "positive"): "positive ground stroke",
    ("IC", "negative"): "negative cloud pulse",
    ("IC", "positive"): "positive cloud pulse",
}


def stroke_colour(stroke_type: str, polarity: str) -> str:
    """Colour for a stroke of `stroke_type` ('CG'/'IC') and `polarity` ('negative'/'positive')."""
    return STROKE_COLOURS[(stroke_type, polarity)]
