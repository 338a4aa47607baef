"""Sizes and colours for field use: touch targets of at least 48 dp (ours are 56), large type, and a
high-contrast black-on-white theme for sun (a dark one for dusk). Plain values; the .kv files read them."""

from __future__ import annotations

TOUCH_DP = 56  # Android's guidance asks for at least 48 dp; gloves ask for more (common practice, no source)
FONT_SP = 20
TITLE_SP = 26

THEMES = {
    "sun": {"bg": (1, 1, 1, 1), "fg": (0, 0, 0, 1), "button": (0, 0, 0, 1), "button_fg": (1, 1, 1, 1),
            "field": (1, 1, 1, 1), "accent": (0.0, 0.25, 0.75, 1), "alarm": (0.65, 0.0, 0.0, 1),
            "chosen": (0.0, 0.35, 0.0, 1)},
    "dusk": {"bg": (0, 0, 0, 1), "fg": (1, 1, 1, 1), "button": (1, 1, 1, 1), "button_fg": (0, 0, 0, 1),
             "field": (0.1, 0.1, 0.1, 1), "accent": (0.55, 0.75, 1.0, 1), "alarm": (1.0, 0.55, 0.45, 1),
             "chosen": (0.5, 0.9, 0.5, 1)},
}
