"""RV input: the CSV reader's sentences for bad input, and the RVData record."""

import re

import numpy as np
import pytest
from conftest import SHARED_RV

from inference.data import RVData, read_rv_csv
from inference.errors import RVDataError

GOOD = "time,rv,rv_err,instrument\n2460000.5,1.5,0.8,east\n2460001.5,-2.0,0.9,east\n"


def _write(tmp_path, text, name="star.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_reads_published_file():
    # Row count and instrument from /work/shared/data/rv/README.md (48 HARPS rows).
    data = read_rv_csv(SHARED_RV / "hd20868_harps.csv")
    assert len(data) == 48
    assert data.instruments == ("HARPS",)
    assert data.rv_err.min() > 0
    assert data.instrument.dtype == object and isinstance(data.instrument[0], str)


def test_missing_instrument_column_gives_default(tmp_path):
    data = read_rv_csv(_write(tmp_path, "time,rv,rv_err\n2460001.0,2.0,0.5\n2460003.0,4.0,0.5\n"))
    assert data.instruments == ("default",)
    np.testing.assert_array_equal(data.time, [2460001.0, 2460003.0])
    np.testing.assert_array_equal(data.instrument_index, [0, 0])
    with pytest.raises(ValueError):
        data.rv[0] = 3.0  # the record's arrays are read-only


BAD_CASES = [
    # (file text, line, column, words that must appear)
    ("time,rv\n1,2\n", 1, "rv_err", "no column"),
    ("time,rv,rv_err\n1,2,0.5\n2,abc,0.5\n", 3, "rv", "not a number"),
    ("time,rv,rv_err\n1,2,0.5\n2,3,nan\n", 3, "rv_err", "not a finite number"),
    ("time,rv,rv_err\n1,2,0.5\n2,3,\n", 3, "rv_err", "empty"),
    ("time,rv,rv_err\n1,2,0.5\n2,3,0\n", 3, "rv_err", "positive"),
    ("time,rv,rv_err\n1,2,0.5\n2,3,-1\n", 3, "rv_err", "positive"),
    ("time,rv,rv_err\n1,2,0.5\n\n2,3,0.5\n1,4,0.5\n", 5, "time", "repeats"),
    ("time,rv,rv_err,instrument\n1,2,0.5,a\n2,3,0.5, \n", 3, "instrument", "empty"),
    ("time,rv,rv_err\n1,2,0.5\ninf,3,0.5\n", 3, "time", "not a finite number"),
]


@pytest.mark.parametrize(("text", "line", "column", "words"), BAD_CASES)
def test_bad_input_sentence_names_file_line_column(tmp_path, text, line, column, words):
    path = _write(tmp_path, text)
    before = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(RVDataError) as info:
        read_rv_csv(path)
    msg = str(info.value)
    assert str(path) in msg and f"line {line}" in msg and f"'{column}'" in msg and words in msg
    assert msg.count(". ") == 0 and msg.endswith(".")  # one sentence
    # Nothing written, nothing lost.
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    assert path.read_text(encoding="utf-8") == text


def test_same_time_on_two_instruments_is_allowed(tmp_path):
    data = read_rv_csv(_write(tmp_path, "time,rv,rv_err,instrument\n2460001,2,0.5,a\n"
                                        "2460001,3,0.5,b\n"))
    assert data.instruments == ("a", "b")


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("", "is empty"),
        ("time,rv,rv_err\n", "no data rows"),
        ("time,rv,rv_err\n1,2,0.5\n2,3,0.5,9,9\n", "well-formed"),
    ],
)
def test_unreadable_files(tmp_path, text, words):
    with pytest.raises(RVDataError, match=re.escape(words)):
        read_rv_csv(_write(tmp_path, text))
    with pytest.raises(RVDataError, match="does not exist"):
        read_rv_csv(tmp_path / "nope.csv")


def test_digest_and_concat(tmp_path):
    a = read_rv_csv(_write(tmp_path, GOOD))
    b = RVData.from_arrays([2460000.5, 2460001.5], [1.5, -2.0], [0.8, 0.9], ["east", "east"])
    assert a.digest == b.digest  # content, not source, decides the digest
    c = RVData.from_arrays([2460000.5, 2460001.5], [1.5, -2.0], [0.8, 0.91], ["east", "east"])
    assert c.digest != a.digest
    d = RVData.from_arrays([2460003.0], [0.0], [1.0], ["west"])
    both = a.concat(d)
    assert len(both) == 3 and both.instruments == ("east", "west")
    with pytest.raises(RVDataError, match="repeats"):
        a.concat(b)
    with pytest.raises(RVDataError, match="lengths"):
        RVData.from_arrays([1.0, 2.0], [1.0], [1.0, 1.0])


def test_repeated_columns_and_extra_fields_are_one_sentence(tmp_path):
    # Found by tests/test_fuzz_readers.py: pandas renames a repeated header name and takes
    # extra fields as an index; both were crashes (ValueError, TypeError), not sentences.
    from inference.errors import RVDataError

    twice = tmp_path / "twice.csv"
    twice.write_text("time,time,rv,rv_err\n2460000.5,2460000.5,1.0,1.0\n")
    with pytest.raises(RVDataError, match="names the column 'time' more than once"):
        read_rv_csv(twice)
    extra = tmp_path / "extra.csv"
    extra.write_text("time,rv,rv_err\n2460000.5,1.0,1.0,7\n")
    with pytest.raises(RVDataError, match="more comma-separated fields than its header"):
        read_rv_csv(extra)
