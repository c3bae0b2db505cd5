"""Tokenizer rules: Unicode words, normal form, filters, stop words, stemming."""

from __future__ import annotations

import dataclasses
import pickle
import threading
import unicodedata
from collections import Counter

import pytest
import Stemmer

from service.text import stopwords
from service.text.tokenize import (
    MAX_TOKEN_LENGTH,
    Tokenizer,
    make_tokenizer,
    normalise,
    supported_languages,
)

# Finnish has a Snowball stemmer but no stop list here: it shows the bare rules.
PLAIN = make_tokenizer("finnish")
ENGLISH = make_tokenizer("english")


# --- normal form ---------------------------------------------------------------------


def test_casefold_makes_sharp_s_and_capitals_one_term() -> None:
    # Unicode full case folding maps "ß" to "ss" (CaseFolding.txt, status F).
    assert PLAIN.tokens("STRASSE straße Straße strasse") == ["strasse"] * 4


def test_accented_latin_composed_and_decomposed_are_one_term() -> None:
    decomposed = "cafe\u0301"  # e + combining acute accent
    assert unicodedata.normalize("NFC", decomposed) != decomposed
    assert PLAIN.tokens(f"Café CAFÉ {decomposed} naïve Ångström") == [
        "café",
        "café",
        "café",
        "naïve",
        "ångström",
    ]


def test_greek_final_sigma_folds_to_sigma() -> None:
    # Case folding maps final "ς" and capital "Σ" to "σ", so both spellings agree.
    assert PLAIN.tokens("ΛΌΓΟΣ λόγος") == ["λόγοσ", "λόγοσ"]


def test_cyrillic_words() -> None:
    assert PLAIN.tokens("Привет, МИР! ёлка") == ["привет", "мир", "ёлка"]


def test_compatibility_forms_become_plain_letters() -> None:
    # NFKC: ligature "ﬁ", full-width letters, superscript two.
    assert PLAIN.tokens("ﬁnance ＡＢＣ x²") == ["finance", "abc", "x2"]


def test_dotted_capital_i_folds_to_plain_i() -> None:
    assert PLAIN.tokens("İstanbul istanbul") == ["istanbul", "istanbul"]


def test_soft_hyphen_is_removed_and_joiners_stay_inside_words() -> None:
    assert PLAIN.tokens("co\u00adoperate") == ["cooperate"]
    persian = "می\u200cخواهم"  # a zero-width non-joiner inside one Persian word
    assert PLAIN.tokens(persian) == [persian]


def test_combining_marks_stay_inside_indic_words() -> None:
    # Devanagari vowel signs and virama are combining marks (Mc, Mn), not separators.
    assert PLAIN.tokens("हिन्दी भाषा") == ["हिन्दी", "भाषा"]


def test_normalise_ascii_fast_path_agrees_with_full_path() -> None:
    text = "Mixed CASE words, Don't STOP 123"
    full = unicodedata.normalize("NFKC", unicodedata.normalize("NFKC", text).casefold())
    assert normalise(text) == full


# --- word boundaries -----------------------------------------------------------------


def test_ascii_fast_path_gives_the_unicode_path_tokens() -> None:
    ascii_text = "".join(map(chr, range(32, 127))) + " Don't l'homme x_y 3rd Z9 it's A-B"
    assert ascii_text.isascii()
    # One accented word makes the same text take the Unicode path.
    assert PLAIN.tokens(ascii_text + " é") == PLAIN.tokens(ascii_text)
    assert PLAIN.tokens(ascii_text + " éé") == [*PLAIN.tokens(ascii_text), "éé"]


def test_hyphens_underscores_periods_and_symbols_split_words() -> None:
    assert PLAIN.tokens("well-known snake_case e.g. fish🐟chips x/y@zz") == [
        "well",
        "known",
        "snake",
        "case",
        "fish",
        "chips",
        "zz",
    ]


def test_apostrophes() -> None:
    text = "don't O'Neill aujourd’hui l'homme dell'arte qu'il archive's foto's"
    assert PLAIN.tokens(text) == [
        "don't",
        "o'neill",
        "aujourd'hui",
        "homme",
        "arte",
        "il",
        "archive",
        "foto",
    ]


def test_typographic_and_ascii_apostrophes_agree() -> None:
    assert PLAIN.tokens("Don’t") == PLAIN.tokens("Don't") == ["don't"]


def test_cjk_runs_become_bigrams() -> None:
    assert PLAIN.tokens("東京都") == ["東京", "京都"]
    assert PLAIN.tokens("とうきょう") == ["とう", "うき", "きょ", "ょう"]
    assert PLAIN.tokens("猫") == []  # a lone ideograph is a one-character token
    assert PLAIN.tokens("iPhone手机。好") == ["iphone", "手机"]


def test_hangul_is_written_with_spaces_and_kept_as_words() -> None:
    assert PLAIN.tokens("한국어 텍스트") == ["한국어", "텍스트"]


# --- filters -------------------------------------------------------------------------


def test_numbers_are_dropped_and_mixed_tokens_kept() -> None:
    # "١٢٣" are Arabic-Indic digits; full-width digits become ASCII under NFKC.
    assert PLAIN.tokens("2024 1,000 3.14 1'000 ١٢٣ ２０２４") == []
    assert PLAIN.tokens("covid19 G7 mp3 1990s") == ["covid19", "g7", "mp3", "1990s"]


def test_one_letter_tokens_are_dropped() -> None:
    assert PLAIN.tokens("a b c x I é ж") == []
    assert PLAIN.tokens("ab") == ["ab"]


def test_over_long_tokens_are_dropped() -> None:
    longest = "k" * MAX_TOKEN_LENGTH
    assert PLAIN.tokens(f"{longest} {longest}k") == [longest]


def test_empty_and_blank_text() -> None:
    assert PLAIN.tokens("") == []
    assert PLAIN.tokens(" \n\t ,.;") == []
    assert ENGLISH.count("") == Counter()


# --- stop words ----------------------------------------------------------------------


def test_english_stop_words_are_dropped() -> None:
    assert ENGLISH.tokens("The map of the archive, and it's what we don't know") == [
        "map",
        "archive",
        "know",
    ]


def test_language_without_stop_list_keeps_function_words() -> None:
    assert stopwords.stop_words_for("finnish") == frozenset()
    assert PLAIN.tokens("the map") == ["the", "map"]


def test_german_stop_words_match_after_casefolding() -> None:
    # "DASS" and "daß" both fold to the listed "dass".
    assert make_tokenizer("german").tokens("DASS daß Karte") == ["karte"]


@pytest.mark.parametrize("language", sorted(stopwords.STOP_WORDS))
def test_stop_lists_are_in_normal_form_and_single_tokens(language: str) -> None:
    words = stopwords.STOP_WORDS[language]
    assert len(words) > 50
    for word in sorted(words):
        assert normalise(word) == word, word
        assert PLAIN.tokens(word) == [word], word


def test_extra_stop_words_are_normalised() -> None:
    tokenizer = make_tokenizer("english", extra_stop_words=("Straße",))
    assert tokenizer.tokens("STRASSE map") == ["map"]


# --- stemming ------------------------------------------------------------------------


@pytest.mark.parametrize("language", ["english", "german", "russian", "greek"])
def test_stemming_applies_the_snowball_stemmer_to_surviving_tokens(language: str) -> None:
    text = "Running runners ran; Häuser HAUS; книги книга; λόγος ΛΌΓΟΙ"
    plain = make_tokenizer(language).tokens(text)
    stemmed = make_tokenizer(language, stemming=True)
    expected = Stemmer.Stemmer(language).stemWords(plain)
    assert stemmed.tokens(text) == expected
    assert stemmed.tokens(text) == expected  # second call answers from the cache
    assert stemmed.count(text) == Counter(expected)


def test_stemming_off_keeps_surface_forms() -> None:
    tokens = make_tokenizer("english", stemming=False).tokens("running maps")
    stemmed = make_tokenizer("english", stemming=True).tokens("running maps")
    assert tokens == ["running", "maps"]
    assert stemmed != tokens


def test_stemming_is_consistent_across_threads() -> None:
    tokenizer = make_tokenizer("english", stemming=True)
    texts = [f"running walked jumping houses {i} connection connected" for i in range(200)]
    expected = [tokenizer.tokens(t) for t in texts]
    results: dict[int, list[list[str]]] = {}

    def work(worker: int) -> None:
        results[worker] = [tokenizer.tokens(t) for t in texts]

    threads = [threading.Thread(target=work, args=(w,)) for w in range(4)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert all(results[w] == expected for w in range(4))


# --- the tokenizer object ------------------------------------------------------------


def test_count_counts_tokens() -> None:
    text = "map maps map archive"
    assert ENGLISH.count(text) == Counter({"map": 2, "maps": 1, "archive": 1})


def test_supported_languages_are_the_snowball_algorithms() -> None:
    languages = supported_languages()
    assert languages == sorted(Stemmer.algorithms())
    assert {"english", "german", "french", "russian"} <= set(languages)
    for language in languages:
        make_tokenizer(language, stemming=True).tokens("words")


def test_unknown_language_is_refused() -> None:
    with pytest.raises(ValueError, match="klingon"):
        make_tokenizer("klingon")
    with pytest.raises(ValueError, match="language"):
        make_tokenizer(3)  # type: ignore[arg-type]


def test_non_text_input_is_refused() -> None:
    with pytest.raises(TypeError, match="bytes"):
        ENGLISH.tokens(b"bytes")  # type: ignore[arg-type]


def test_tokenizer_is_frozen_and_compares_by_settings() -> None:
    assert make_tokenizer("english") == make_tokenizer("english")
    assert hash(make_tokenizer("english")) == hash(make_tokenizer("english"))
    assert make_tokenizer("english") != make_tokenizer("english", stemming=True)
    with pytest.raises(dataclasses.FrozenInstanceError):
        ENGLISH.stemming = True  # type: ignore[misc]
    assert "stop_words" not in repr(ENGLISH)


def test_tokenizer_survives_pickling() -> None:
    tokenizer = make_tokenizer("german", stemming=True)
    tokenizer.tokens("Häuser")  # creates the per-thread stemmer, which is not picklable
    copy = pickle.loads(pickle.dumps(tokenizer))
    assert copy == tokenizer
    assert copy.tokens("Häuser") == tokenizer.tokens("Häuser")


def test_tokenizer_built_directly_with_own_stop_words() -> None:
    tokenizer = Tokenizer(language="english", stemming=False, stop_words=frozenset({"map"}))
    assert tokenizer.tokens("the map") == ["the"]
