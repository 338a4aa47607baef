"""Controllers of the tablet screens: plain Python over the tablet store and the shared rules (no Kivy), so
everything a screen does is tested without a window. One module per screen's concern:

    day.py        Day start: site, season, trench, recorder; instrument setup reviewed before recording
    finds.py      recording, editing and voiding finds, with the live checks and the cautions
    units.py      units, their relations and level points
    find_list.py  the find list's search and filters
    labels.py     the day's print queue of bag labels
    link.py       the camp link: enrolment, sync with progress, bundles
"""

from __future__ import annotations

from .day import Day, DayController, SetupReview
from .find_list import FindFilter, FindListController
from .finds import FindController, Position, Saved
from .labels import LabelQueue
from .link import CampLink, LinkStatus
from .units import UnitsController

__all__ = [
    "CampLink", "Day", "DayController", "FindController", "FindFilter", "FindListController", "LabelQueue",
    "LinkStatus", "Position", "Saved", "SetupReview", "UnitsController",
]
