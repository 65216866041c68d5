"""printable() against a character-by-character reading of Unicode's own categories (Python's unicodedata).

The rule: characters of category Cc (controls) and Cs (surrogates), the line and paragraph separators and
the bidirectional formatting characters of Unicode's UAX #9 (embeddings, overrides, isolates and the marks
LRM, RLM, ALM) are escaped; everything else is kept. The fast path (a string with nothing to escape is
returned as it is) must agree with that reading for ASCII and non-ASCII text alike.
"""

from __future__ import annotations

import unicodedata

from hypothesis import given, settings
from hypothesis import strategies as st

from afterlook.core.printable import printable

# UAX #9 explicit formatting characters and marks (Unicode Standard Annex #9, section 2)
BIDI = set("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")
SEPARATORS = set("\u2028\u2029\x85")


def kept_reference(ch: str) -> bool:
    return not (ch in BIDI or ch in SEPARATORS or unicodedata.category(ch) in ("Cc", "Cs"))


def test_every_escaped_format_character_fails_isprintable():
    # printable()'s fast path returns a string as it is when str.isprintable() holds: that must be False
    # for each character the rule escapes (all of UAX #9's are category Cf, which isprintable rejects)
    for ch in BIDI | SEPARATORS:
        assert unicodedata.category(ch) in ("Cf", "Cc", "Zl", "Zp")
        assert not ch.isprintable() and not ("a" + ch + "b").isprintable()


def test_a_reordering_character_in_text_that_is_otherwise_printable_is_escaped():
    assert printable("名前 \u202e x") == "名前 \\u202e x"
    assert printable("abc\u2066d") == "abc\\u2066d"
    assert printable("plain ascii, nothing to do") == "plain ascii, nothing to do"
    assert printable("Zürich Straße 名") == "Zürich Straße 名"


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet=st.one_of(st.characters(codec="utf-8"), st.sampled_from(sorted(BIDI | SEPARATORS)),
                                  st.characters(max_codepoint=0x7f))))
def test_kept_exactly_when_every_character_is_kept_by_the_reference(text):
    out = printable(text)
    if all(kept_reference(ch) for ch in text):
        assert out == text
    else:
        assert out != text
        assert all(kept_reference(ch) for ch in out)
