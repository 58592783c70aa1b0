"""The one session verdict and the step outcome vocabulary (``meas.verdict``): pure data.

The rules are the project's own (issue 14, "Outcomes that say what happened"); the precedence
FAIL > INCOMPLETE > PASS with unverified readings > PASS is common practice for a test record:
a defect found outranks a gap, a gap outranks a reading nobody could check.
"""

from __future__ import annotations

import pytest

from meas.verdict import (
    EXIT_FAIL,
    EXIT_PASS,
    EXIT_STOPPED,
    EXIT_UNVERIFIED,
    StepRecord,
    outcome_from_log,
    records_from_log,
    session_verdict,
)

P = StepRecord("a", "passed")
SKIP = StepRecord("b", "skipped", "bench not available")
OPEN = StepRecord("c", "not_captured")
WAIVED = StepRecord("d", "accepted_with_failures", "known CT fault", failed_checks=2)
SKIP_FAILING = StepRecord("e", "skipped", "CT to be rewired", failed_checks=1)


@pytest.mark.parametrize(
    "records, unverified, word, code",
    [
        ([P], (), "PASS", EXIT_PASS),
        (
            [P],
            ("M4 q.T: no redundant measurement",),
            "PASS with unverified readings",
            EXIT_UNVERIFIED,
        ),
        ([P, SKIP], (), "INCOMPLETE", EXIT_FAIL),
        ([P, OPEN], ("M4 q.T",), "INCOMPLETE", EXIT_FAIL),
        ([P, WAIVED], (), "FAIL", EXIT_FAIL),
        ([P, SKIP_FAILING, SKIP], (), "FAIL", EXIT_FAIL),
    ],
)
def test_the_verdict_takes_the_worst_outcome(records, unverified, word, code):
    v = session_verdict(records, unverified)
    assert (v.word, v.exit_code) == (word, code)
    assert v.line.startswith(word)


def test_unverified_readings_exit_0_unless_strict():
    """Issue rule: unverified readings exit 0 but say so; --strict makes them fail."""
    lines = ("s1 M1: M1 VT ratio: no other reading predicts it",)
    assert session_verdict([P], lines).exit_code == 0
    strict = session_verdict([P], lines, strict=True)
    assert (strict.word, strict.exit_code) == ("PASS with unverified readings", EXIT_FAIL)
    assert "M1 VT ratio" in strict.line
    assert session_verdict([P], (), strict=True).exit_code == EXIT_PASS


def test_the_line_names_the_steps_behind_it():
    v = session_verdict([P, SKIP, OPEN])
    assert v.line == "INCOMPLETE: 1 of 3 steps skipped (b); 1 of 3 steps not captured (c)"
    v = session_verdict([P, WAIVED, SKIP])
    assert v.line == "FAIL: checks failed in 1 of 3 steps (d); 1 of 3 steps skipped (b)"
    assert session_verdict([P]).line == "PASS: all 1 steps passed"
    u = session_verdict([P], ["M4 q.T: no redundant measurement"])
    assert u.line == (
        "PASS with unverified readings: all 1 steps passed; 1 reading(s) unverified: "
        "M4 q.T: no redundant measurement"
    )


def test_a_stopped_session_exits_3_with_the_verdict_so_far():
    v = session_verdict([P, OPEN], stopped=True)
    assert v.word == "INCOMPLETE" and v.exit_code == EXIT_STOPPED and v.stopped


@pytest.mark.parametrize(
    "state, outcome, kind",
    [
        ("skipped", "pass", "skipped"),  # an old journal's misleading "pass" on a skip
        ("skipped", "skipped", "skipped"),
        ("accepted", "fail", "accepted_with_failures"),
        ("accepted", "signed", "passed"),
        ("accepted", "accepted_with_failures", "accepted_with_failures"),
        ("accepted", "passed", "passed"),
        ("reviewing", "pass", "not_captured"),
        (None, None, "not_captured"),
    ],
)
def test_outcome_from_the_step_log(state, outcome, kind):
    assert outcome_from_log(state, outcome) == kind


def test_records_from_the_step_log_keep_failures_of_a_skipped_review():
    log = [
        {"step": "a", "state": "reviewing", "outcome": "pass", "reason": None},
        {"step": "a", "state": "accepted", "outcome": "passed", "reason": None},
        {"step": "b", "state": "reviewing", "outcome": "fail", "reason": None},
        {"step": "b", "state": "skipped", "outcome": "skipped", "reason": "CT"},
        {"step": "c", "state": "settling", "outcome": None, "reason": None},
    ]
    recs = records_from_log(["a", "b", "c", "d"], log)
    assert [(r.step_id, r.outcome, r.failed_checks) for r in recs] == [
        ("a", "passed", 0),
        ("b", "skipped", 1),
        ("c", "not_captured", 0),
        ("d", "not_captured", 0),
    ]
    assert recs[1].reason == "CT"
    assert session_verdict(recs).word == "FAIL"
