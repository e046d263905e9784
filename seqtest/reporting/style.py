"""How results look in every picture: colours, shapes, dash patterns, decision words.

Colours are the eight of Okabe and Ito (2008), a palette chosen to stay distinct for
readers with the common forms of colour blindness (common practice for scientific
figures); each series also has its own marker shape and dash pattern, so that a
figure printed in grey still reads. The SVG charts (:mod:`seqtest.reporting.svg`) and
the matplotlib figures (:mod:`seqtest.plotting`) take their styles from here.

References
----------
.. [1] Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make
       figures and presentations that are friendly to colorblind people.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["DECISION_WORDS", "OKABE_ITO", "OUTCOME_STYLES", "SERIES", "Series", "decision_words"]

#: The Okabe-Ito palette.
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}


@dataclass(frozen=True)
class Series:
    """How one series is drawn.

    Attributes
    ----------
    label : str
        Legend text.
    color : str
        Hex colour from :data:`OKABE_ITO` (or a grey).
    marker : str
        matplotlib marker code (``o``, ``v``, ``^``, ``s``, ``D``, ``x``, or ``""``).
    dash : str
        SVG ``stroke-dasharray`` (``""`` for a solid line).
    mpl_dash : tuple
        The same for matplotlib (``(0, ())`` for solid).
    hatch : str
        matplotlib hatch for bars (the SVG charts use the pattern of the same name).
    """

    label: str
    color: str
    marker: str = ""
    dash: str = ""
    mpl_dash: tuple = (0, ())
    hatch: str = ""


#: Series of the analysis charts.
SERIES: dict[str, Series] = {
    "observed_z": Series("observed z", OKABE_ITO["black"], "o"),
    "efficacy": Series("efficacy boundary (at the looks taken)", OKABE_ITO["blue"], "v"),
    "efficacy_lower": Series("lower efficacy boundary", OKABE_ITO["blue"], "^"),
    "planned_efficacy": Series("planned efficacy boundary", OKABE_ITO["blue"], "",
                               "6 4", (0, (6, 4))),
    "futility": Series("futility boundary", OKABE_ITO["vermillion"], "s", "2 3",
                       (0, (2, 3))),
    "planned_futility": Series("planned futility boundary", OKABE_ITO["vermillion"], "",
                               "8 3 2 3", (0, (8, 3, 2, 3))),
    "futility_band": Series("futility region", OKABE_ITO["orange"]),
    "estimate": Series("estimate at the look", OKABE_ITO["black"], "o"),
    "interval": Series("repeated interval (valid at every look)", OKABE_ITO["blue"], ""),
    "adjusted": Series("adjusted at the stop", OKABE_ITO["vermillion"], "D"),
}

#: Styles of the simulated outcomes (columns of a simulation's ``stops``).
OUTCOME_STYLES: dict[str, Series] = {
    "stop_efficacy_upper": Series("efficacy, treatment better", OKABE_ITO["blue"], "",
                                  hatch=""),
    "stop_efficacy_lower": Series("efficacy, control better", OKABE_ITO["sky_blue"], "",
                                  hatch="//"),
    "stop_futility": Series("futility", OKABE_ITO["vermillion"], "", hatch="xx"),
    "complete_not_significant": Series("complete, not significant", "#999999", "",
                                       hatch=".."),
}

#: Short words for a decision on a chart or in a table.
DECISION_WORDS: dict[str, str] = {
    "continue": "continue",
    "stop_efficacy": "stop for efficacy",
    "stop_futility": "stop for futility",
    "complete_not_significant": "complete, not significant",
    "stop_harm": "stop for harm",
}


def decision_words(decision: object, direction: object = None) -> str:
    """A decision in a few words, with the direction of an efficacy stop."""
    text = DECISION_WORDS.get(str(decision), str(decision))
    if direction in ("treatment_better", "control_better", "treatment_non_inferior"):
        text += f" ({str(direction).replace('_', ' ')})"
    return text
