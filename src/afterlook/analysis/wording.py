"""One source for every word and scale the CLI, the workbench and the report show.

A screen only lays these out: two screens that compute a word themselves
can disagree, these cannot.
"""

from __future__ import annotations

import math

__all__ = [
    "BAR_FULL_SCALE", "RELATION_BROKEN", "RELATION_RULE", "bar_cells", "reading", "relation_broken",
    "relation_words", "standing", "flip_words", "candidate_verdict",
]

#: |z| that fills one half of a signed z bar.
BAR_FULL_SCALE = 4.0
RELATION_BROKEN = "relation broken"
#: The broken-relation rule in words, for legends.
RELATION_RULE = "|cond z| >= 3 while |z| < 2"


def _finite(x) -> bool:
    return x is not None and math.isfinite(x)


def reading(z: float | None) -> str:
    """A z in words: typical (|z| < 1), a little low/high (< 2), low/high (< 3), very low/high."""
    if z is None or not math.isfinite(z):
        return "n/a"
    size = abs(z)
    if size < 1:
        return "typical"
    side = "low" if z < 0 else "high"
    if size < 2:
        return f"a little {side}"
    if size < 3:
        return side
    return f"very {side}"


def relation_broken(z: float | None, conditional_z: float | None) -> bool:
    """The broken-relation rule: ``|conditional z| >= 3`` while ``|z| < 2``.

    The feature's value is ordinary on its own but far from what the other
    features predict for it (full model only).
    """
    return _finite(conditional_z) and abs(conditional_z) >= 3 and _finite(z) and abs(z) < 2


def relation_words(z: float | None, conditional_z: float | None) -> str:
    """Conditional z in words (full model): 'relation broken' (see :func:`relation_broken`),
    'off for the others' when |cond z| >= 3 otherwise, else ''."""
    if relation_broken(z, conditional_z):
        return RELATION_BROKEN
    if _finite(conditional_z) and abs(conditional_z) >= 3:
        return "off for the others"
    return ""


def bar_cells(z: float | None, half: int, full_scale: float = BAR_FULL_SCALE) -> tuple[int, bool]:
    """Length in cells of one side of a signed z bar, and whether |z| is beyond the scale.

    ``cells = min(half, round(|z| / full_scale * half))``; NaN gives (0, False).
    """
    if z is None or not math.isfinite(z) or half < 1:
        return 0, False
    return min(half, int(round(abs(z) / full_scale * half))), abs(z) > full_scale


def standing(label: bool | None, flagged: bool, log_density: float) -> str:
    """Where a case stands, in words."""
    if math.isnan(log_density):
        return "not scored (a reading is missing or infinite)"
    if log_density == -math.inf:
        return ("outside a feature's domain (undefined on finite readings): flagged" if flagged
                else "outside a feature's domain (undefined on finite readings)")
    if label is None:
        return "flagged" if flagged else "not flagged"
    if label:
        return "caught: labelled anomaly, flagged" if flagged else "miss: labelled anomaly, not flagged"
    return "false alarm: labelled normal, flagged" if flagged else "normal: labelled normal, not flagged"


def flag_word(flagged: bool | None) -> str:
    """One case's flag in words, the same on every screen and in reports ("n/a" when unknown)."""
    return "n/a" if flagged is None else ("flagged" if flagged else "not flagged")


def flip_words(before: bool, after: bool) -> str:
    """How a case's flag changed from one model to another, in words."""
    if after and not before:
        return "now flagged"
    if before and not after:
        return "no longer flagged"
    return "still flagged" if after else "still not flagged"


VERDICT_WORDS = {
    "holds-up": "holds up",
    "exposes-only": "exposes only",
    "chance": "could be chance",
    "hurts": "hurts",
}


def candidate_verdict(c) -> str:
    """A candidate's verdict in words (the same words on every screen)."""
    if c.verdict in VERDICT_WORDS:
        words = VERDICT_WORDS[c.verdict]
        if c.verdict == "exposes-only" and c.heldout is None:
            words += " (not re-fitted)" if c.false_alarms_added is None else " (no held-out estimate)"
        return words
    if c.beyond_chance:
        return "beyond chance" if c.false_alarms_added is not None else "beyond chance (not re-fitted)"
    return "could be chance"


def heldout_gain_text(c) -> str:
    """Held-out F1 change of a candidate's re-fit, e.g. "+0.067"; "n/a" when not estimated."""
    h = c.heldout
    return "n/a" if h is None else f"{h.gain:+.3f}"


def stability_text(c) -> str:
    """In how many fold searches the candidate was found again, e.g. "4/5"; "n/a" when not estimated."""
    h = c.heldout
    if h is None or h.found_in_folds is None or not h.stability_folds:
        return "n/a"
    return f"{h.found_in_folds}/{h.stability_folds}"


#: The candidate kinds of a search with a unit column, in words (the CLI table and the workbench name them;
#: the pair kinds read from their expression).
UNIT_KIND_WORDS = {
    "unit_relative": "vs its unit's baseline",
    "unit_standardized": "vs its unit's baseline, in unit sd",
    "change": "change since the previous reading",
    "unit_standardized_difference": "pair, each vs its unit",
    "unit_ratio": "pair, each over its unit's median",
}
#: What the unit functions in a candidate's text mean (the legend says it when one is listed).
UNIT_FUNCTIONS_WORDS = ("unit_median, unit_scale: the unit's own median and spread (MAD x 1.4826), frozen from "
                        "its normal training rows; lag(x, 1): the unit's previous reading")


def kind_words(kind: str) -> str | None:
    """A unit kind in words, or None for the pair kinds (their expression says what they are)."""
    return UNIT_KIND_WORDS.get(kind)
