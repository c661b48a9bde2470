"""The merged word-frequency table: its two ways of finding a word agree.

Source: wordfreq's own lists (``get_frequency_dict``), read directly.
"""

from __future__ import annotations

import math
import random

from wordfreq import get_frequency_dict

from geonorm.resolve.mentions import LANGUAGES, SEARCHED_WORDS, _zipf_table, word_zipf


def test_searching_and_bisecting_find_the_same_row():
    table = _zipf_table()
    words = table.text[1:-1].split("\n")
    sample = ["", "zzqqx", "paris", "the", "über", *random.Random(5).sample(words, 2000)]
    searched = []
    fresh = type(table)(table.text[1:-1], table.values)
    for w in sample[:SEARCHED_WORDS]:
        searched.append(fresh.get(w))
    assert fresh.sorted is None  # no list split yet
    bisected = [fresh.get(w) for w in sample]
    assert fresh.sorted is not None
    assert bisected[:SEARCHED_WORDS] == searched
    assert [table.get(w) for w in sample] == bisected


def test_values_are_wordfreq_zipf_values():
    english = get_frequency_dict("en", wordlist="small")  # wordfreq, the source
    for word in ("the", "city", "paris", "valley"):
        want = math.log10(english[word]) + 9
        assert word_zipf(word)[LANGUAGES.index("en")] == want
    assert word_zipf("zzqqxvv") == (0.0,) * len(LANGUAGES)
