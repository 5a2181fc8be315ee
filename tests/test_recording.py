"""Warnings recorded per thread, and counted warnings merged over partitions."""

from __future__ import annotations

import pickle
import threading
import warnings

import pytest

from curvescan.errors import AssumptionWarning, DataQualityWarning
from curvescan.recording import (Recorded, counted, describe, merge, record_warnings,
                                 warn_again, warn_counted)

TEMPLATE = "{bad} of {total} curves have a bad thing (e.g. {examples}); limit {limit}"


def _interleaved(recorder) -> tuple[list, list]:
    """Two threads record at once, entering and leaving in the order A in, B in, A out,
    B out, each warning while both are inside; returns what each recorded."""
    a_in, b_in, a_out = threading.Event(), threading.Event(), threading.Event()
    got: dict[str, list] = {}

    def a() -> None:
        with recorder() as caught:
            a_in.set()
            b_in.wait(5)
            warnings.warn("from A", DataQualityWarning)
        got["a"] = [str(getattr(w, "text", getattr(w, "message", w))) for w in caught]
        a_out.set()

    def b() -> None:
        a_in.wait(5)
        with recorder() as caught:
            b_in.set()
            a_out.wait(5)
            warnings.warn("from B", DataQualityWarning)
        got["b"] = [str(getattr(w, "text", getattr(w, "message", w))) for w in caught]

    threads = [threading.Thread(target=a), threading.Thread(target=b)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    return got["a"], got["b"]


def test_two_threads_recording_at_once_each_get_their_own_warnings():
    got_a, got_b = _interleaved(record_warnings)
    assert got_a == ["from A"]
    assert got_b == ["from B"]


def test_the_standard_recorder_fails_the_same_interleaving():
    # the reason for record_warnings: with catch_warnings, B's exit-time state is A's
    # entry state, so B's warning is lost to B (it reaches A's list or stderr)
    def standard():
        return warnings.catch_warnings(record=True)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got_a, got_b = _interleaved(standard)
    assert (got_a, got_b) != (["from A"], ["from B"])


def test_a_thread_that_does_not_record_still_shows_its_warnings(capsys):
    inside, done = threading.Event(), threading.Event()
    shown: list[str] = []
    saved = warnings.showwarning

    def show(message, category, *args, **kwargs):
        shown.append(str(message))

    def other() -> None:
        inside.wait(5)
        warnings.warn("not recorded", UserWarning)
        done.set()

    warnings.showwarning = show
    try:
        t = threading.Thread(target=other)
        t.start()
        with record_warnings() as caught:
            inside.set()
            done.wait(5)
            warnings.warn("recorded", UserWarning)
        t.join(5)
        assert warnings.showwarning is show  # put back on leaving
    finally:
        warnings.showwarning = saved
    assert [r.text for r in caught] == ["recorded"]
    assert shown == ["not recorded"]


def test_recorders_nest_and_the_innermost_gets_the_warning():
    with record_warnings() as outer:
        warnings.warn("first", UserWarning)
        with record_warnings() as inner:
            warnings.warn("second", UserWarning)
        warn_again(inner)
    assert [r.text for r in inner] == ["second"]
    assert [r.text for r in outer] == ["first", "second"]


def test_filters_are_put_back_after_recording():
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)
        with record_warnings() as caught:
            warnings.warn("recorded, not raised", UserWarning)
        assert caught[0].text == "recorded, not raised"
        with pytest.raises(UserWarning):
            warnings.warn("raised again", UserWarning)


def test_counted_warning_keeps_its_parts_through_warn_and_pickle():
    with record_warnings() as caught:
        warn_counted(TEMPLATE, DataQualityWarning, {"bad": 2, "total": 9}, {"limit": 0.5},
                     ["x", "y", "z", "w"])
    (r,) = pickle.loads(pickle.dumps(caught))
    assert r.text == "2 of 9 curves have a bad thing (e.g. x, y, z); limit 0.5"
    assert r.counts == (("bad", 2), ("total", 9))
    assert r.fixed == (("limit", "0.5"),)
    assert r.line().startswith("DataQualityWarning: 2 of 9")


def test_merge_adds_counts_and_keeps_fixed_values_apart():
    parts = [counted(TEMPLATE, DataQualityWarning, {"bad": 2, "total": 9}, {"limit": 0.5},
                     ["x"]),
             Recorded(AssumptionWarning, "plain"),
             counted(TEMPLATE, DataQualityWarning, {"bad": 3, "total": 11}, {"limit": 0.5},
                     ["x", "q", "r", "s"]),
             counted(TEMPLATE, DataQualityWarning, {"bad": 1, "total": 1}, {"limit": 0.7}),
             Recorded(AssumptionWarning, "plain")]
    merged = merge(parts)
    assert describe(merged) == [
        "DataQualityWarning: 5 of 20 curves have a bad thing (e.g. x, q, r); limit 0.5",
        "AssumptionWarning: plain",
        "DataQualityWarning: 1 of 1 curves have a bad thing (e.g. ); limit 0.7",
    ]


def test_same_template_of_two_categories_is_not_merged():
    merged = merge([counted("{n} things", DataQualityWarning, {"n": 1}),
                    counted("{n} things", AssumptionWarning, {"n": 2})])
    assert [r.text for r in merged] == ["1 things", "2 things"]


def test_a_warning_with_nothing_to_warn_about_is_recorded_not_shown(recwarn):
    template = "{bad} of {n} values are bad"
    with record_warnings() as caught:
        warn_counted(template, DataQualityWarning, {"bad": 0, "n": 40}, when=["bad"])
        warn_counted(template, DataQualityWarning, {"bad": 3, "n": 10}, when=["bad"])
    assert [r.shown for r in caught] == [False, True]
    # merged, the partition with nothing to warn about still counts in the total
    assert describe(merge(caught)) == ["DataQualityWarning: 3 of 50 values are bad"]
    assert describe(caught[:1]) == []
    # outside a recorder a warning with nothing to warn about is not raised at all
    warn_counted(template, DataQualityWarning, {"bad": 0, "n": 40}, when=["bad"])
    warn_again(caught[:1])
    assert not [w for w in recwarn if issubclass(w.category, DataQualityWarning)]
    warn_again(caught[1:])
    assert [str(w.message) for w in recwarn] == ["3 of 10 values are bad"]
