"""Stratigraphic ranges: where each kind of find first and last occurs, with confidence intervals on the ends.

For a kind of find (a taxon, an artifact material, a category) found in H horizons spanning an observed range R
(from its first, lowest horizon to its last, highest), the classical confidence interval on one end of the range
extends that end by a fraction alpha of R (Strauss and Sadler 1989, Mathematical Geology 21: 411-427; Marshall
1990, Paleobiology 16: 1-10; from memory):

    one end alone, confidence C:   alpha = (1 - C) ** (-1 / (H - 1)) - 1
    both ends together, each extended by alpha (Strauss and Sadler's two-ended case, used by Marshall 1990):
                                   C = 1 - 2 (1 + alpha) ** -(H - 1) + (1 + 2 alpha) ** -(H - 1)

solved here for alpha by bisection (C grows with alpha). Both rest on their authors' assumption: the horizons
holding the kind are a random sample from a uniform distribution over its true range (random, uniform recovery:
equal collecting effort and preservation through the section, no change in abundance, fossil horizons
independent of one another). With H of 1 or 2 no interval can be given. Here the positions are the horizons'
places in the horizon order (steps), their mean depths (m) and their modelled ages (ka, draw by draw, through
``agemodel.horizon_draws``); with only a few horizons in a section, the step scale is coarse and an extension
of less than one step means "no further than the next horizon, probably".
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Iterable

import numpy as np
from numpy.typing import NDArray

from ..records import Horizon

__all__ = ["CONFIDENCE", "Range", "alpha_both_ends", "alpha_one_end", "stratigraphic_ranges"]

CONFIDENCE = 0.95


def _check(h: int, confidence: float) -> None:
    if not 0 < confidence < 1:
        raise ValueError(f"confidence {confidence!r} must lie between 0 and 1 (e.g. 0.95)")
    if h < 0:
        raise ValueError(f"the number of horizons {h!r} cannot be negative")


def alpha_one_end(h: int, confidence: float = CONFIDENCE) -> float | None:
    """The extension of one end, as a fraction of the observed range, at ``confidence`` (Strauss and Sadler
    1989; Marshall 1990); None when H < 3 (no interval can be given on one or two horizons)."""
    _check(h, confidence)
    if h < 3:
        return None
    return (1.0 - confidence) ** (-1.0 / (h - 1)) - 1.0


def _both(alpha: float, h: int) -> float:
    return 1.0 - 2.0 * (1.0 + alpha) ** -(h - 1) + (1.0 + 2.0 * alpha) ** -(h - 1)


def alpha_both_ends(h: int, confidence: float = CONFIDENCE) -> float | None:
    """The extension of each end, as a fraction of the observed range, such that both true ends lie within the
    extended range at ``confidence`` (Strauss and Sadler 1989, their two-ended case); None when H < 3."""
    _check(h, confidence)
    if h < 3:
        return None
    lo, hi = 0.0, 1.0
    while _both(hi, h) < confidence:
        hi *= 2.0
    for _ in range(200):
        mid = (lo + hi) / 2
        if _both(mid, h) < confidence:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-13 * hi:
            break
    return (lo + hi) / 2


@dataclass(frozen=True)
class Range:
    """One kind of find's observed range and its 95 % extensions; ``first`` is the oldest (lowest) horizon."""

    kind: str  # taxon, material or category
    name: str
    finds: int
    horizons: int  # H: horizons with occurrences
    first_horizon: str
    last_horizon: str
    range_steps: int  # horizon steps from first to last
    range_m: float | None
    first_age_ka: float | None  # medians over the draws
    last_age_ka: float | None
    range_ka: float | None
    confidence: float
    alpha_one_end: float | None
    alpha_both_ends: float | None
    extension_steps: float | None  # one end alone: alpha_one_end x range
    extension_m: float | None
    extension_ka: float | None
    first_bound_ka: float | None  # the first appearance's older limit (one end alone), median over draws
    last_bound_ka: float | None  # the last appearance's younger limit (one end alone), median over draws
    note: str


def stratigraphic_ranges(occurrences: Iterable[tuple[str, str, uuid.UUID | None]], horizons: list[Horizon], *,
                         depth_m: dict[uuid.UUID, float] | None = None,
                         age_draws: dict[uuid.UUID, NDArray[np.float64]] | None = None,
                         confidence: float = CONFIDENCE) -> list[Range]:
    """One ``Range`` per (kind, name) from occurrences ``(kind, name, horizon id)``, one per find (finds in no
    horizon are counted apart in the note). ``age_draws`` gives each horizon's age in every draw (ka)."""
    step = {h.id: i for i, h in enumerate(sorted(horizons, key=lambda h: h.order))}
    code = {h.id: h.code for h in horizons}
    finds: dict[tuple[str, str], int] = {}
    loose: dict[tuple[str, str], int] = {}
    seen: dict[tuple[str, str], set[uuid.UUID]] = {}
    for kind, name, h in occurrences:
        key = (kind, name)
        finds[key] = finds.get(key, 0) + 1
        if h in step:
            seen.setdefault(key, set()).add(h)  # type: ignore[arg-type]
        else:
            loose[key] = loose.get(key, 0) + 1
    out = []
    for key in sorted(finds):
        where = sorted(seen.get(key, set()), key=lambda h: step[h])
        note = f"{loose[key]} of its finds are in units with no horizon" if key in loose else ""
        if not where:
            out.append(Range(*key, finds[key], 0, "", "", 0, None, None, None, None, confidence, None, None, None, None,
                             None, None, None, note or "no find of it is in a horizon"))
            continue
        out.append(_one(key, finds[key], where, step, code, depth_m or {}, age_draws or {}, confidence, note))
    return out


def _one(key: tuple[str, str], n: int, where: list[uuid.UUID], step: dict[uuid.UUID, int], code: dict[uuid.UUID, str],
         depth_m: dict[uuid.UUID, float], age_draws: dict[uuid.UUID, NDArray[np.float64]], confidence: float,
         note: str) -> Range:
    last, first = where[0], where[-1]  # top (youngest) and bottom (oldest)
    h = len(where)
    a1, a2 = alpha_one_end(h, confidence), alpha_both_ends(h, confidence)
    steps = step[first] - step[last]
    rm = abs(depth_m[first] - depth_m[last]) if first in depth_m and last in depth_m else None
    fa = la = rk = ek = fb = lb = None
    if first in age_draws and last in age_draws:
        old, young = age_draws[first], age_draws[last]
        span = old - young
        fa, la, rk = float(np.median(old)), float(np.median(young)), float(np.median(span))
        if a1 is not None:
            ek = float(np.median(a1 * span))
            fb, lb = float(np.median(old + a1 * span)), float(np.median(young - a1 * span))
    elif age_draws:
        note = "; ".join(filter(None, [note, "a horizon at one end has no age"]))
    if a1 is None:
        note = "; ".join(filter(None, [note, f"found in {h} horizon{'s' if h > 1 else ''}: no interval can be given "
                                             "on fewer than three"]))
    return Range(*key, n, h, code[first], code[last], steps, rm, fa, la, rk, confidence, a1, a2,
                 None if a1 is None else a1 * steps, None if a1 is None or rm is None else a1 * rm, ek, fb, lb, note)

