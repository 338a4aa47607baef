"""Sizes and colours for field use: touch targets of at least 48 dp (ours are 56), large type, and a
high-contrast black-on-white theme for sun (a dark one for dusk). Plain values; the .kv files read them.

Every pair of text colour and the colour it is drawn on is listed in ``TEXT_PAIRS``; each reaches 7:1 in
both themes (WCAG 2.x level AAA for body text; ``tests/mobile/test_theme.py`` computes the ratios). Cautions are
always drawn in the sun theme (``CAUTION``), whichever theme the screen is in.
"""

from __future__ import annotations

TOUCH_DP = 56  # Android's guidance asks for at least 48 dp; gloves ask for more (common practice, no source)
FONT_SP = 20
TITLE_SP = 26
MIN_CONTRAST = 7.0  # WCAG 2.x success criterion 1.4.6 (Contrast, Enhanced, level AAA): 7:1 for body text

THEMES = {
    "sun": {"bg": (1, 1, 1, 1), "fg": (0, 0, 0, 1), "button": (0, 0, 0, 1), "button_fg": (1, 1, 1, 1),
            "field": (1, 1, 1, 1), "accent": (0.0, 0.25, 0.75, 1), "alarm": (0.65, 0.0, 0.0, 1),
            "chosen": (0.0, 0.35, 0.0, 1), "muted": (0.3, 0.3, 0.3, 1), "selected": (0.85, 0.9, 1.0, 1)},
    "dusk": {"bg": (0, 0, 0, 1), "fg": (1, 1, 1, 1), "button": (1, 1, 1, 1), "button_fg": (0, 0, 0, 1),
             "field": (0.1, 0.1, 0.1, 1), "accent": (0.55, 0.75, 1.0, 1), "alarm": (1.0, 0.55, 0.45, 1),
             "chosen": (0.5, 0.9, 0.5, 1), "muted": (0.7, 0.7, 0.7, 1), "selected": (0.15, 0.22, 0.4, 1)},
}

CAUTION = THEMES["sun"]

# (text colour, what it is drawn on) for every text the widgets draw (widgets.kv, the screens' .kv files)
TEXT_PAIRS: tuple[tuple[str, str], ...] = (
    ("fg", "bg"),            # Say, Caption, Title
    ("alarm", "bg"),         # Alarm: errors and cautions
    ("fg", "field"),         # Entry text, Pick, an unchosen Choice, a find row
    ("muted", "field"),      # an Entry's hint, a disabled button's text
    ("muted", "bg"),
    ("button_fg", "button"),  # Big
    ("button_fg", "accent"),  # Big while pressed
    ("button_fg", "chosen"),  # a chosen Choice
    ("fg", "selected"),      # the selected find row
    ("alarm", "field"),      # the title of a find being corrected is drawn on the page
)
