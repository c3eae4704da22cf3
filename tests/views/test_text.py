"""How levels and figures are phrased on the pages."""

from __future__ import annotations

from typing import get_args

from app.schemas.panels import RiskLevel
from app.views import text


def test_every_level_has_its_own_word_and_shape():
    # Level is never told by colour alone (WCAG 2.2, 1.4.1 Use of Color).
    levels = get_args(RiskLevel)
    assert set(text.LEVELS) == set(levels)
    assert len({text.level_words(v) for v in levels}) == len(levels)
    assert len({text.level_shape(v) for v in levels}) == len(levels)


def test_probability_is_never_a_flat_zero_or_one():
    assert text.probability(0.0) == "< 0.1 %"
    assert text.probability(1.0) == "> 99.9 %"
    assert text.probability(0.2534) == "25.3 %"
    assert text.probability(None) == "–"


def test_first_sentence_cuts_at_a_word():
    assert text.first_sentence("Short one. Second.") == "Short one."
    long = "Side A has moved 2.3 um a layer toward 327 deg from +x, +1.9 um in x and -1.2 um in y"
    cut = text.first_sentence(long, 40)
    assert cut.endswith(" …") and len(cut) <= 42 and long.startswith(cut[:-2])


def test_audit_details_read_the_figures_under_either_name():
    # Entries written before migration 0008 keep their names: the trail is never rewritten.
    new = text.audit_details({"ftb_current_um": 27.55, "p_final_over_limit": 0.16,
                              "rule": "via_off_pad"})
    old = text.audit_details({"ftb_worst_um": 27.55, "p_exceed": 0.16, "rule": "via_off_pad"})
    assert new == old == "current FTB 27.6 µm; P(final over limit) 16.0 %; rule via off pad"
