"""Words and small output helpers: plurals, relative paths, reception words at their thresholds."""

import math
import os

import pytest

from analysis.thresholds import (
    LISTENABLE_MONO_CN_DB,
    LISTENABLE_STEREO_CN_DB,
    reception_flags,
    reception_word,
)
from bandcensus.commands._text import CN_EXPLAINED, display_path, plural


def test_plurals():
    assert plural(0, "sweep") == "0 sweeps"
    assert plural(1, "sweep") == "1 sweep"
    assert plural(2, "sweep") == "2 sweeps"
    assert plural(1, "match", "matches") == "1 match"
    assert plural(5, "match", "matches") == "5 matches"


def test_paths_relative_where_shorter(tmp_path):
    inside = tmp_path / "out" / "report.html"
    assert display_path(inside, cwd=tmp_path) == os.path.join("out", "report.html")
    far = "/"  # the root is shorter absolute than as ../../..
    assert display_path(far, cwd=tmp_path) == os.path.abspath("/")
    assert display_path(tmp_path / "a.db", cwd=tmp_path / "x" / "y") == os.path.join("..", "..", "a.db")


def test_cn_is_explained_once_with_the_other_name():
    assert "C/N" in CN_EXPLAINED and "SNR" in CN_EXPLAINED and "audio" in CN_EXPLAINED


@pytest.mark.parametrize(
    "cn, word",
    [(None, "not detected"), (math.nan, "not detected"), (2.99, "not detected"), (3.0, "detected"),
     (LISTENABLE_MONO_CN_DB - 0.01, "detected"), (LISTENABLE_MONO_CN_DB, "listenable mono"),
     (LISTENABLE_STEREO_CN_DB - 0.01, "listenable mono"), (LISTENABLE_STEREO_CN_DB, "listenable stereo")],
)
def test_reception_words_at_their_thresholds(cn, word):
    assert reception_word(cn, detection_margin_db=3.0) == word


def test_reception_flags_use_the_same_words_as_json_keys():
    assert reception_flags(40.0) == {"detected": True, "listenable_mono": True, "listenable_stereo": True}
    assert reception_flags(5.0, detection_margin_db=6.0) == {
        "detected": False, "listenable_mono": False, "listenable_stereo": False}
    assert LISTENABLE_MONO_CN_DB < LISTENABLE_STEREO_CN_DB
