"""Reading campaign files: regular files only, bounded reads, storable text, CSV for spreadsheets."""

from __future__ import annotations

import csv
import json
import os
import signal
import socket
from contextlib import contextmanager
from pathlib import Path

import pandas as pd
import pytest

from lamellume import io


@contextmanager
def no_hang(seconds: int = 10):
    """Fail (instead of hanging the suite) when the body blocks, e.g. on a named pipe."""
    def alarm(signum, frame):
        raise AssertionError(f"blocked for more than {seconds} s")

    old = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def _special(tmp_path, kind):
    """A file system object of ``kind`` at tmp_path/x.json (POSIX kinds, common practice)."""
    path = tmp_path / "x.json"
    if kind == "directory":
        path.mkdir()
    elif kind == "fifo":
        os.mkfifo(path)
    elif kind == "dangling link":
        path.symlink_to(tmp_path / "missing.json")
    elif kind == "link to /dev/zero":
        path.symlink_to("/dev/zero")
    elif kind == "link to /dev/null":
        path.symlink_to("/dev/null")
    elif kind == "link loop":
        path.symlink_to(path)
    elif kind == "socket":
        sock = socket.socket(socket.AF_UNIX)
        sock.bind(str(path))
        sock.close()
    elif kind == "link to a directory":
        (tmp_path / "d").mkdir()
        path.symlink_to(tmp_path / "d")
    return path


@pytest.mark.parametrize("kind, words", [
    ("directory", "is a directory, not a file"),
    ("fifo", "named pipe (FIFO)"),
    ("dangling link", "dangling symbolic link"),
    ("link to /dev/zero", "is a device"),
    ("link to /dev/null", "is a device"),
    ("link loop", "cannot read file"),
    ("socket", "is a socket"),
    ("link to a directory", "is a directory"),
])
def test_only_regular_files_are_read(tmp_path, kind, words):
    path = _special(tmp_path, kind)
    with no_hang():
        data, reason, size = io.read_limited(path, 1000)
        raw = io.read_record(path)
        digest, why = io.campaign_file_digest(path, "entries")
    assert data is None and words in reason and size == 0
    assert raw.data is None and words in raw.error and raw.error_field == "(file)"
    assert digest is None and words in why


def test_link_to_a_regular_file_is_read(tmp_path):
    target = tmp_path / "real.json"
    target.write_text('{"a": 1}')
    (tmp_path / "x.json").symlink_to(target)
    assert io.read_record(tmp_path / "x.json").data == {"a": 1}


def test_read_is_bounded_by_bytes_read(tmp_path):
    path = tmp_path / "big.json"
    path.write_bytes(b" " * 5000)
    data, reason, size = io.read_limited(path, 1000)
    assert data is None and size == 1001 and "5000 bytes, larger than the 1000-byte limit" in reason
    data, reason, size = io.read_limited(path, 5000)
    assert reason is None and len(data) == 5000 == size


def test_read_is_bounded_by_bytes_read_when_the_file_reports_no_size(tmp_path):
    # A file that reports a smaller size than it holds: files under /proc are regular files
    # that report size 0 (proc(5), Linux man-pages; common practice). The cap counts bytes read.
    link = tmp_path / "x.json"
    link.symlink_to("/proc/self/status")
    assert os.stat(link).st_size == 0
    data, reason, size = io.read_limited(link, 100)
    assert data is None and size == 101 and "has more bytes than it reports" in reason
    raw = io.read_record(link)
    assert raw.data is None and raw.error_field == "(file)" and "invalid JSON" in raw.error  # read, not "empty"


@pytest.mark.parametrize("text, field", [
    ('{"a": 1, "a": 2}', "a"),
    ('{"v": [{"m": {"x": 1, "y": 2, "x": 3}}]}', "v[0].m.x"),
    ('{"edge_ev": {"1": -5.0, "1": -4.0}}', "edge_ev.1"),
])
def test_duplicate_keys_are_a_reject_with_their_path(tmp_path, text, field):
    # source: RFC 8259 sec. 4 (names within an object SHOULD be unique; behaviour otherwise
    # is unpredictable across implementations)
    path = tmp_path / "x.json"
    path.write_text(text)
    raw = io.read_record(path)
    assert raw.data is None and raw.error_field == field and "more than once" in raw.error


@pytest.mark.parametrize("text, field", [
    ('{"formula": "Ab\\ud800"}', "formula"),
    ('{"valleys": [{"label": "\\udfff"}]}', "valleys[0].label"),
    ('{"x": {"\\ud800": 1}}', "x"),
])
def test_unstorable_text_is_a_reject_with_its_path(tmp_path, text, field):
    # source: Unicode Standard, sec. 3.9 (D76: surrogate code points are not Unicode scalar
    # values and cannot be encoded in UTF-8)
    path = tmp_path / "x.json"
    path.write_text(text)
    raw = io.read_record(path)
    assert raw.data is None and raw.error_field == field and "surrogate" in raw.error
    raw.error.encode("utf-8")  # the reason itself is storable


def test_paired_surrogates_are_one_character(tmp_path):
    # source: RFC 8259 sec. 7 (a character outside the BMP is escaped as a surrogate pair)
    path = tmp_path / "x.json"
    path.write_text('{"formula": "\\ud83d\\ude00"}')
    assert io.read_record(path).data == {"formula": "\U0001F600"}


@pytest.mark.parametrize("name, kind, words", [
    ("a.json", "entries", None),
    ("a.cif", "structures", None),
    (".a.json", "entries", "hidden file"),
    ("a.JSON", "entries", "suffix '.JSON' is not '.json'"),
    ("a.Json", "entries", "case-sensitive"),
    ("a.CIF", "structures", "suffix '.CIF' is not '.cif'"),
    ("a.json.bak", "entries", "does not end in '.json'"),
    ("a.json ", "entries", "does not end in '.json'"),
    ("a\udcff.json", "entries", "not valid UTF-8"),
])
def test_skip_reasons(name, kind, words):
    reason = io.skip_reason(name, kind)
    assert reason is None if words is None else words in reason


def test_printable_name():
    assert io.printable_name("a\udcffb.json") == "a\\xffb.json"
    assert io.printable_name("plain-1.json") == "plain-1.json"


@pytest.mark.parametrize("value, shown", [
    # source: OWASP "CSV Injection" (leading =, +, -, @, tab, carriage return are neutralised
    # with a leading single quote)
    ("=HYPERLINK(\"http://x\")", "'=HYPERLINK(\"http://x\")"),
    ("+1+2", "'+1+2"),
    ("-2+3", "'-2+3"),
    ("@SUM(A1)", "'@SUM(A1)"),
    ("\tcmd", "'\tcmd"),
    ("\rcmd", "'\rcmd"),
    ("MoS2", "MoS2"),
    ("a=b", "a=b"),
    ("", ""),
    (-0.5, -0.5),
    (3, 3),
    (None, None),
])
def test_spreadsheet_safe_text(value, shown):
    assert io.spreadsheet_safe_text(value) == shown


def test_write_csv_neutralises_text_and_keeps_numbers(tmp_path):
    frame = pd.DataFrame({"formula": ["=1+1", "MoS2", "@x"], "gap_ev": [-0.25, 1.5, 2.0],
                          "rank": [1, 2, 3], "ok": [True, False, True]})
    path = tmp_path / "t.csv"
    io.write_csv(frame, path)
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["formula"] for r in rows] == ["'=1+1", "MoS2", "'@x"]
    assert [float(r["gap_ev"]) for r in rows] == [-0.25, 1.5, 2.0]
    assert [r["gap_ev"] for r in rows][0] == "-0.25"  # a number, not neutralised text
    assert [r["rank"] for r in rows] == ["1", "2", "3"] and rows[0]["ok"] == "True"
    assert frame["formula"].iloc[0] == "=1+1"  # the caller's frame is not changed


def test_record_hash_of_unread_files_differs_by_reason(tmp_path):
    """Files not read still get distinct input hashes (the reason stands in for the content)."""
    (tmp_path / "d.json").mkdir()
    (tmp_path / "l.json").symlink_to(tmp_path / "nowhere")
    a, b = io.read_record(tmp_path / "d.json"), io.read_record(tmp_path / "l.json")
    assert a.sha256 and b.sha256 and a.sha256 != b.sha256
    assert json.dumps(a.error) and json.dumps(b.error)


def test_missing_file_names_a_case_variant_beside_it(tmp_path):
    (tmp_path / "Mo-S.CIF").write_text("data_x\n")
    assert io.file_kind_problem(tmp_path / "Mo-S.cif") == \
        "file not found ('Mo-S.CIF' exists; file names are case-sensitive)"
    assert io.file_kind_problem(tmp_path / "other.cif") == "file not found"


def test_campaign_file_digest(tmp_path):
    # source: FIPS 180-4 test vector, SHA-256("abc") (common practice)
    (tmp_path / "a.json").write_bytes(b"abc")
    (tmp_path / "a.JSON").write_bytes(b"abc")
    assert io.campaign_file_digest(tmp_path / "a.json", "entries") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", None)
    digest, reason = io.campaign_file_digest(tmp_path / "a.JSON", "entries")
    assert digest is None and "case-sensitive" in reason


# ---------------------------------------------------------------------------------------------
# Properties (hypothesis): the reader never raises, and what it returns is always storable
# ---------------------------------------------------------------------------------------------

from hypothesis import HealthCheck, given, settings, strategies as st  # noqa: E402

_TEXT = st.text(st.one_of(st.characters(), st.characters(min_codepoint=0xD800, max_codepoint=0xDFFF)),
                max_size=8)
_JSON = st.recursive(st.none() | st.booleans() | st.integers(-2**63, 2**63) | st.floats(allow_nan=False, allow_infinity=False)
                     | _TEXT, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(_TEXT, inner, max_size=4),
                     max_leaves=12)


def _has_surrogate(obj) -> bool:
    if isinstance(obj, str):
        return any(0xD800 <= ord(c) <= 0xDFFF for c in obj)
    if isinstance(obj, dict):
        return any(_has_surrogate(k) or _has_surrogate(v) for k, v in obj.items())
    if isinstance(obj, list):
        return any(_has_surrogate(v) for v in obj)
    return False


def _storable(obj) -> bool:
    try:
        json.dumps(obj, ensure_ascii=False).encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(obj=_JSON)
def test_parsed_records_are_storable_or_rejected_with_a_path(tmp_path, obj):
    path = tmp_path / "x.json"
    path.write_text(json.dumps(obj))  # ASCII with \\u escapes, lone surrogates included
    raw = io.read_record(path)
    if not _has_surrogate(obj):
        assert raw.error is None and raw.data == obj
    elif raw.error is not None:
        assert "surrogate" in raw.error and raw.error_field
        raw.error_field.encode("utf-8")
    else:  # only valid surrogate pairs, joined into characters by the parser
        assert _storable(raw.data)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=600))
def test_read_record_never_raises_on_bytes(tmp_path, data):
    path = tmp_path / "x.json"
    path.write_bytes(data)
    raw = io.read_record(path)
    if raw.error is None:
        assert _storable(raw.data)
    else:
        raw.error.encode("utf-8")


@pytest.mark.parametrize("kind, words", [("fifo", "named pipe"), ("link to /dev/zero", "is a device"),
                                         ("directory", "is a directory")])
def test_calculation_files_are_read_by_the_same_rules(tmp_path, kind, words):
    from lamellume import calcio
    from lamellume.calculations import ImportProblem

    path = _special(tmp_path, kind)
    for read in (lambda: calcio._load_json(path, "c/x.json"), lambda: calcio.planar_average(path, "c/x", [0, 0, 1])):
        with no_hang(), pytest.raises(ImportProblem) as err:
            read()
        assert words in str(err.value.reason)


def test_campaign_history_dir_is_one_per_campaign(tmp_path, monkeypatch):
    (tmp_path / "a" / "demo").mkdir(parents=True)
    (tmp_path / "a" / "mine").mkdir(parents=True)
    (tmp_path / "link").symlink_to(tmp_path / "a" / "demo")
    monkeypatch.chdir(tmp_path)
    one = io.campaign_history_dir("results/history", "a/demo")
    assert one == Path("results/history/demo")
    assert one == io.campaign_history_dir("results/history", tmp_path / "a" / "demo")  # any spelling
    assert one == io.campaign_history_dir("results/history", "link")
    assert one == io.campaign_history_dir("results/history", "a/demo/")
    assert one != io.campaign_history_dir("results/history", "a/mine")
    assert io.campaign_history_dir("h", tmp_path / "my campaign!") == Path("h/my_campaign_")
    assert io.campaign_history_dir("h", tmp_path / "..hidden") == Path("h/hidden")  # never a hidden folder
