"""The cautions the tablet shows, and the rule that decides when the shoring check is due. No Kivy here.

Each caution informs and records the recorder's answer; none says a trench is safe or that remains were handled
correctly. Local codes, the site's own safety plan and licensed people decide that; the texts say so.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from schema.records import SafetyCheck

__all__ = ["Caution", "heat_caution", "human_remains_caution", "laser_caution", "shoring_caution", "shoring_due"]


@dataclass(frozen=True)
class Caution:
    """A caution to show: its kind (as stored in a ``SafetyCheck``), a title, the text, and what to ask."""

    kind: str
    title: str
    text: str
    ask: str
    depth_m: float | None = None
    stops_work: bool = False
    affirm: tuple[str, ...] = ()  # steps the recorder ticks one by one; only the ticked ones are recorded


def shoring_caution(depth_m: float, limit_m: float) -> Caution:
    return Caution(
        kind="shoring", depth_m=depth_m, title="Deep trench: shoring check",
        text=(f"This level is {depth_m:.2f} m below the trench's surface, past the {limit_m:.2f} m set for this site. "
              "Before anyone works deeper, the person responsible for the trench checks that the sides are shored, "
              "benched or stepped back as local rules require, and that there is a safe way in and out. "
              "Baulk records your answer; it cannot judge whether the trench is safe."),
        ask="What was checked, and by whom?",
    )


def human_remains_caution() -> Caution:
    return Caution(
        kind="human_remains", stops_work=True, title="Possible human remains: stop",
        text=("Stop work at this spot. Secure it: cover it and keep people away. Notify the site director and the "
              "authorities that local law names before anything more is exposed or moved, and follow their "
              "instructions and the law of the place. The precise location is withheld from public exports."),
        ask="Who was notified, and when?",
        affirm=("work stopped at the spot", "the spot secured"),
    )


def laser_caution(laser_class: str) -> Caution:
    return Caution(
        kind="laser", title="Total station laser",
        text=(f"Laser class as marked on this instrument: {laser_class}. Never look into the beam or aim it at "
              "anyone's eyes, and follow the instrument's manual and local rules for its class."),
        ask="Acknowledge (say who set up the instrument)",
    )


def heat_caution() -> Caution:
    return Caution(
        kind="heat", title="Heat",
        text=("Drink water often, rest in shade, cover up, and watch each other for signs of heat illness "
              "(confusion, no sweating, cramps). Follow the site's heat plan and the advice of its first-aider."),
        ask="Acknowledge",
    )


def shoring_due(*, depth_m: float | None, limit_m: float, checks: list[SafetyCheck], trench_id: object,
                today: dt.date, tz: dt.tzinfo) -> bool:
    """True when a level at ``depth_m`` is past the site's limit and no shoring check was recorded today for
    the trench (a new day, or a deeper level than the last check, asks again)."""
    if depth_m is None or depth_m < limit_m:
        return False
    for c in checks:
        if c.kind == "shoring" and c.trench_id == trench_id and c.checked_at.astimezone(tz).date() == today:
            if c.depth_m is None or depth_m <= c.depth_m + 0.25:
                return False
    return True
