"""Named colours and type sizes for reports (Okabe-Ito colour-blind-safe palette).

Okabe, M. and Ito, K. (2008) "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people" - the eight colours below.
"""

from __future__ import annotations

OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: Stage colours in stage order: calm to concerning, then an exit colour.
STAGE_COLOUR_ORDER = ("bluish_green", "sky_blue", "orange", "vermillion", "reddish_purple", "blue",
                      "yellow", "black")

INK = "#222222"          # body text
MUTED = "#666666"        # secondary text, axis labels
RULE = "#BBBBBB"         # table rules
STRIPE = "#F2F2F2"       # alternate table rows
CAUTION_FILL = "#FFF4D6"  # background of the advisory box (a pale tint of Okabe-Ito orange)

#: A4 portrait in inches (210 x 297 mm).
A4_INCHES = (8.27, 11.69)

TITLE_SIZE = 18
HEADING_SIZE = 13
BODY_SIZE = 10
TABLE_SIZE = 8.5
SMALL_SIZE = 7.5


def stage_colours(n_stages: int) -> list:
    """Hex colours for ``n_stages`` ordered stages (cycles when there are more than eight)."""
    return [OKABE_ITO[STAGE_COLOUR_ORDER[i % len(STAGE_COLOUR_ORDER)]] for i in range(n_stages)]
