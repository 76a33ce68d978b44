"""One colour per event class, for every plot and page rxlog draws.

The colours are the Okabe & Ito colour-universal-design set (M. Okabe and K. Ito,
"Color Universal Design (CUD): how to make figures and presentations that are friendly
to colorblind people", J*FLY, 2008; hex values as listed by Wong 2011, Nature Methods 8,
441, and the colorblindr R package's palette_OkabeIto): seven hues that stay apart under the common colour-vision
deficiencies, plus black. The seven hues go to the seven classes from the sky or of
unknown origin; interference, which is "not the sky", gets the neutral grey that usual
variants of the set put in place of black (#999999). Black itself is kept for outlines
and text, so it never means a class.

Nothing else in the night report's plots, its page or the comparison timeline uses these
hues (bands, light curves and region boxes are grey or ink), so there a colour always
means a class.

The page's CSS is generated from the same table (``css_rules``), so the plots and the
page cannot drift apart.
"""

from __future__ import annotations

from rxlog.store import CLASSES

# Okabe & Ito (2008) colour-universal-design set (hex values as in Wong 2011).
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky blue": "#56B4E9", "bluish green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermilion": "#D55E00", "reddish purple": "#CC79A7",
}
NEUTRAL_GREY = "#999999"   # the grey of the set's usual variant without black

CLASS_COLOURS = {
    "jovian_l": OKABE_ITO["vermilion"],
    "jovian_s": OKABE_ITO["reddish purple"],
    "solar_iii": OKABE_ITO["yellow"],
    "solar_ii": OKABE_ITO["orange"],
    "solar_iv": OKABE_ITO["bluish green"],
    "fadeout": OKABE_ITO["sky blue"],
    "rfi": NEUTRAL_GREY,
    "unknown": OKABE_ITO["blue"],
}

# Human names of the classes, as legends and the page show them.
CLASS_NAMES = {
    "jovian_l": "Jupiter L-burst", "jovian_s": "Jupiter S-burst",
    "solar_iii": "Solar type III", "solar_ii": "Solar type II", "solar_iv": "Solar type IV",
    "fadeout": "Short-wave fadeout", "rfi": "Interference", "unknown": "Real, unclassified",
}
# ... and of every label a reviewer can give: the classes, nothing there, not sure.
LABEL_NAMES = {**CLASS_NAMES, "noise": "Nothing there", "unsure": "Not sure"}

# Colours of what is not a class (bands, light curves, region boxes, the selection):
# greys and ink, so that a palette colour always means a class.
INK = "#1d2327"
BAND_GREY = "#6b757d"

# A class-coloured line is drawn over a light halo over a dark edge: the halo shows it on
# a dark background (viridis' deep purple), the edge on a light one (viridis' yellow, a
# white page), whatever the class colour.
HALO = "#FFFFFF"
EDGE = "#000000"
HALO_PT = 0.8   # halo width on each side of the line, points
EDGE_PT = 0.6   # dark edge width outside the halo, points


def colour(cls: str) -> str:
    """The class's colour (the 'unknown' colour for a class this table does not know)."""
    return CLASS_COLOURS.get(cls, CLASS_COLOURS["unknown"])


def outline(linewidth: float) -> list:
    """matplotlib path effects drawing a line of ``linewidth`` points over a light halo and a dark edge."""
    # matplotlib is imported when a line is drawn: the page's CSS comes from this module without it
    import matplotlib.patheffects as pe

    return [pe.Stroke(linewidth=linewidth + 2.0 * (HALO_PT + EDGE_PT), foreground=EDGE),
            pe.Stroke(linewidth=linewidth + 2.0 * HALO_PT, foreground=HALO),
            pe.Normal()]


def relative_luminance(hex_colour: str) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour '#RRGGBB' (0 black .. 1 white).

    W3C, Web Content Accessibility Guidelines 2.1, definition "relative luminance".
    """
    c = [int(hex_colour[k:k + 2], 16) / 255.0 for k in (1, 3, 5)]
    lin = [x / 12.92 if x <= 0.03928 else ((x + 0.055) / 1.055) ** 2.4 for x in c]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def contrast_ratio(a: str, b: str) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05) of two colours, 1 (same) .. 21 (black on white)."""
    la, lb = sorted((relative_luminance(a), relative_luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def ink(cls: str) -> str:
    """Black or white, whichever reads better as text on the class colour."""
    c = colour(cls)
    return "#000000" if contrast_ratio(c, "#000000") >= contrast_ratio(c, "#FFFFFF") else "#FFFFFF"


def css_rules() -> str:
    """CSS custom properties ``--class-<cls>`` (and ``--class-<cls>-ink`` for text on it),
    and a ``.cls-<cls>`` rule setting ``--c`` and ``--c-ink`` for every class."""
    props = " ".join(f"--class-{c}: {CLASS_COLOURS[c]}; --class-{c}-ink: {ink(c)};" for c in CLASSES)
    rules = "\n".join(f".cls-{c} {{ --c: var(--class-{c}); --c-ink: var(--class-{c}-ink); }}" for c in CLASSES)
    return f":root {{ {props} }}\n{rules}\n"
