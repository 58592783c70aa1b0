"""Step outcomes and the one session verdict: what a technician signs, computed in one place.

The console, the headless summary, the report's first line, the dataset and the exit code of
every command that ends a session all take their verdict from ``session_verdict``; nothing
else decides PASS or FAIL for a session. Plain data in, plain data out: this module imports
nothing of the walk, the journal or the dataset, so each of them can use it.

Step outcomes (``OutcomeKind``):

- ``passed``: the step was completed and its review had no failing check (a signed hold
  point and a written note are completed steps too);
- ``accepted_with_failures``: accepted although checks failed (gate ``allow``), with a reason;
- ``skipped``: left without acceptance, with a reason;
- ``not_captured``: never completed (the session stopped before it, or it is still open).

Session verdicts, worst first: ``FAIL`` (a check failed in a step that was accepted or
skipped), ``INCOMPLETE`` (a step skipped or not captured, nothing failed),
``PASS with unverified readings`` (every step passed, but some readings no check could
verify; ``unverified`` lists them), ``PASS``.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal, get_args

OutcomeKind = Literal["passed", "accepted_with_failures", "skipped", "not_captured"]
OUTCOME_KINDS: tuple[str, ...] = get_args(OutcomeKind)
OUTCOME_WORDS: dict[str, str] = {
    "passed": "passed",
    "accepted_with_failures": "accepted with failures",
    "skipped": "skipped",
    "not_captured": "not captured",
}

VerdictWord = Literal["PASS", "PASS with unverified readings", "FAIL", "INCOMPLETE"]
VERDICT_WORDS: tuple[str, ...] = get_args(VerdictWord)

# Exit codes of every command that ends a session (README "Exit codes").
EXIT_PASS = 0
EXIT_FAIL = 1  # FAIL or INCOMPLETE
EXIT_USAGE = 2
EXIT_STOPPED = 3  # stopped before the end; the session can be resumed
# PASS with unverified readings: 0, the session passed and says what nothing could verify;
# with ``strict`` (the commands' --strict) it is EXIT_FAIL.
EXIT_UNVERIFIED = 0

_EXIT_OF: dict[str, int] = {
    "PASS": EXIT_PASS,
    "PASS with unverified readings": EXIT_UNVERIFIED,
    "FAIL": EXIT_FAIL,
    "INCOMPLETE": EXIT_FAIL,
}


@dataclass(frozen=True)
class StepRecord:
    """One step's outcome as the verdict reads it."""

    step_id: str
    outcome: OutcomeKind
    reason: str = ""
    failed_checks: int = 0  # (check, subject) pairs failing in the step's last review


@dataclass(frozen=True)
class Verdict:
    """The session verdict: the word, one line saying why, and the exit code."""

    word: VerdictWord
    detail: str
    exit_code: int
    unverified: tuple[str, ...] = ()
    stopped: bool = False

    @property
    def line(self) -> str:
        """``WORD: detail`` (or the word alone), the same text everywhere it is shown."""
        return f"{self.word}: {self.detail}" if self.detail else self.word

    def as_dict(self) -> dict[str, Any]:
        return {
            "verdict": self.word,
            "detail": self.detail,
            "line": self.line,
            "exit_code": self.exit_code,
            "unverified": list(self.unverified),
            "stopped": self.stopped,
        }


def _names(records: Sequence[StepRecord], limit: int = 6) -> str:
    ids = [r.step_id for r in records]
    return ", ".join(ids[:limit]) + (f" and {len(ids) - limit} more" if len(ids) > limit else "")


def session_verdict(
    outcomes: Sequence[StepRecord],
    unverified: Sequence[str] = (),
    *,
    stopped: bool = False,
    strict: bool = False,
) -> Verdict:
    """The verdict of a session whose sequence has the steps of ``outcomes`` (every step, in order).

    ``unverified``: one-line descriptions of readings no check could verify (for example
    "M4 q.T: no redundant measurement"), supplied by the model-aware estimator; a session whose
    steps all passed but has any of them is "PASS with unverified readings", never "PASS".
    ``stopped``: the session stopped early and can be resumed; the word says what is known so
    far and the exit code is ``EXIT_STOPPED``. ``strict``: unverified readings fail the
    session's exit code (the word stays "PASS with unverified readings").
    """
    total = len(outcomes)
    failed = [r for r in outcomes if r.failed_checks > 0 or r.outcome == "accepted_with_failures"]
    skipped = [r for r in outcomes if r.outcome == "skipped"]
    open_ = [r for r in outcomes if r.outcome == "not_captured"]
    word: VerdictWord
    if failed:
        word = "FAIL"
        parts = [f"checks failed in {len(failed)} of {total} steps ({_names(failed)})"]
    elif skipped or open_:
        word = "INCOMPLETE"
        parts = []
    elif unverified:
        word = "PASS with unverified readings"
        shown = "; ".join(unverified[:3]) + ("; ..." if len(unverified) > 3 else "")
        parts = [f"all {total} steps passed; {len(unverified)} reading(s) unverified: {shown}"]
    else:
        word = "PASS"
        parts = [f"all {total} steps passed"]
    if word in ("FAIL", "INCOMPLETE"):
        if skipped:
            parts.append(f"{len(skipped)} of {total} steps skipped ({_names(skipped)})")
        if open_:
            parts.append(f"{len(open_)} of {total} steps not captured ({_names(open_)})")
    code = EXIT_STOPPED if stopped else _EXIT_OF[word]
    if strict and word == "PASS with unverified readings" and not stopped:
        code = EXIT_FAIL
    return Verdict(word, "; ".join(parts), code, tuple(unverified), stopped)


def outcome_from_log(state: str | None, outcome: str | None) -> OutcomeKind:
    """A step's outcome from its last journalled transition (``step_log`` state and outcome).

    Journals written before the outcome vocabulary recorded the check status (``pass``,
    ``fail``, ``signed``, ``noted``) on acceptance; those map to the same outcomes.
    """
    if state == "skipped":
        return "skipped"
    if state == "accepted":
        if outcome in OUTCOME_KINDS and outcome not in ("skipped", "not_captured"):
            return outcome  # type: ignore[return-value]
        return "accepted_with_failures" if outcome == "fail" else "passed"
    return "not_captured"


def records_from_log(
    step_ids: Sequence[str], history: Iterable[Mapping[str, Any]]
) -> list[StepRecord]:
    """Every step's record from the journal's step transitions (``state``, ``outcome``,
    ``reason`` per row, oldest first); a step with failing checks in its last review counts
    them as one failure (the log keeps the review's worst status, not the count)."""
    last: dict[str, Mapping[str, Any]] = {}
    review: dict[str, str | None] = {}
    for h in history:
        last[h["step"]] = h
        if h["state"] == "reviewing":  # the last review stands until a new one replaces it
            review[h["step"]] = h["outcome"]
    out = []
    for sid in step_ids:
        got = last.get(sid)
        h = got if got is not None else {}
        kind = outcome_from_log(h.get("state"), h.get("outcome"))
        failed = (
            1 if kind in ("accepted_with_failures", "skipped") and review.get(sid) == "fail" else 0
        )
        if kind == "accepted_with_failures":
            failed = max(failed, 1)
        reason = (h.get("reason") or "") if kind != "not_captured" else ""
        out.append(StepRecord(sid, kind, reason, failed))
    return out
