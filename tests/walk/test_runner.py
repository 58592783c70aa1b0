"""The step state machine, driven by real snapshots from the simulated bench over loopback Modbus.

Each test builds a session on a fast copy of the demo profile (short transient, 0.1 s polls)
with a short test sequence, then drives the runner the way the console does: commands in,
``view()`` out, every decision checked in the real SQLite journal.
"""

from __future__ import annotations

import asyncio
import contextlib
import time

import pytest
from support.benches import TEST_SEQUENCE, fast_profile_text, write_bench

from meas.errors import BenchwalkError, ProfileError
from meas.profile import load_profile
from meas.results import CheckResult, Status
from meas.session import Session
from meas.walk.runner import Runner
from meas.walk.states import State

# The simulated bench's time advances one poll interval per cycle in ``Session.views`` (its
# lockstep), and a loaded machine runs fewer cycles per second than the poll rate: the wall
# clock deadlines below are this many times the simulated seconds a test expects to need.
WALL_PER_SIM_S = 8.0


async def until(session: Session, pred, timeout_s: float = 15.0):
    """Poll and tick until ``pred(view)`` holds; fail after the deadline (see WALL_PER_SIM_S)."""
    deadline = time.monotonic() + timeout_s * WALL_PER_SIM_S
    last = None
    async with contextlib.aclosing(session.views()) as views:
        async for view in views:
            last = view
            if pred(view):
                return view
            if time.monotonic() > deadline:
                break
    brief = last and (last.index, last.state, last.action, last.mismatches, last.message)
    raise AssertionError(f"condition not reached in {timeout_s} s; last view: {brief}")


def in_state(*states: State):
    return lambda v: v.state in states


def states_of(session: Session, step_id: str) -> list[str]:
    return [r["state"] for r in session.journal.step_history() if r["step"] == step_id]


@pytest.fixture
async def make_session(tmp_path):
    made: list[Session] = []

    async def make(sequence: str = TEST_SEQUENCE, edit=None, faults=(), name="bench") -> Session:
        profile = write_bench(tmp_path / name, sequence, edit)
        s = await Session.new(
            profile,
            "T. Tester",
            sessions_dir=tmp_path / "sessions",
            session_id=f"test-{name}",
            simulate=True,
            faults=faults,
            seed=7,
        )
        made.append(s)
        return s

    yield make
    for s in made:
        await s.close()


@pytest.mark.slow
async def test_full_walk_through_every_kind(make_session):
    s = await make_session()
    r = s.runner
    v = await until(s, lambda v: bool(v.actual))  # a first snapshot has arrived
    assert v.state is State.WAITING and v.action == "capture" and v.index == 0 and v.total == 5
    assert v.to_operate == ()  # a capture step operates nothing
    with pytest.raises(BenchwalkError, match="capture step"):
        r.confirm_operation()
    with pytest.raises(BenchwalkError, match="cannot accept now"):
        r.accept()

    # capture step: waiting -> verifying -> settling -> capturing -> reviewing -> accepted
    r.capture()
    assert r.state is State.VERIFYING
    seen = set()
    v = await until(s, lambda v: seen.add(v.state) or v.state is State.REVIEWING)
    assert {State.SETTLING} <= seen
    assert v.captured == 2 and v.capture_target == 2
    assert v.action == "accept", v.results[:3]
    assert v.overall == "consistent"
    r.accept()
    assert states_of(s, "radial") == [
        "waiting",
        "verified",
        "settling",
        "capturing",
        "reviewing",
        "accepted",
    ]
    settle_rows = [
        h for h in s.journal.step_history() if h["step"] == "radial" and h["state"] == "capturing"
    ]
    assert settle_rows[0]["settle_s"] is not None and settle_rows[0]["settle_s"] >= 0.0
    roles = [
        row["role"]
        for row in s.journal._conn.execute(
            "SELECT role FROM snapshot WHERE step = 'radial' ORDER BY id"
        )
    ]
    assert roles.count("capture") == 2 and "settling" in roles
    n_checks = s.journal._conn.execute(
        "SELECT count(*) FROM check_result WHERE step = 'radial'"
    ).fetchone()[0]
    assert n_checks > 0

    # remote step: two deliberate steps
    v = r.view()
    assert (
        v.step.id == "rx-in"
        and v.action == "request_remote"
        and v.remote_todo == (("RX", "closed"),)
    )
    with pytest.raises(BenchwalkError, match="request RX closed first"):
        await r.confirm_remote("RX", "closed", "T. Tester")
    with pytest.raises(BenchwalkError, match="operated by hand"):
        r.request_remote("TIE", "closed")
    with pytest.raises(BenchwalkError, match="does not call for"):
        r.request_remote("CB1", "open")
    assert s.bench.switch_states()["RX"] == "open"  # nothing written yet
    # no command while another switch is not as the step expects
    s.bench.operate_by_hand("LB2", "open")
    await until(s, lambda v: "LB2" in v.mismatches)
    with pytest.raises(BenchwalkError, match="LB2 is open, expected closed"):
        r.request_remote("RX", "closed")
    s.bench.operate_by_hand("LB2", "closed")
    await until(s, lambda v: v.mismatches == ("RX",))
    question = r.request_remote("RX", "closed")
    assert "RX" in question and "Confirm" in question
    assert s.bench.switch_states()["RX"] == "open"  # a request alone writes nothing
    with pytest.raises(BenchwalkError, match="name"):
        await r.confirm_remote("RX", "closed", "  ")
    await r.confirm_remote("RX", "closed", "T. Tester")
    assert s.bench.switch_states()["RX"] == "closed"
    v = await until(s, in_state(State.REVIEWING))
    r.accept()
    events = [
        e[0]
        for e in s.journal._conn.execute("SELECT kind FROM event WHERE step='rx-in' ORDER BY id")
    ]
    assert events[:3] == ["remote_requested", "remote_confirmed", "remote_result"]

    # hold: named sign-off
    assert r.view().action == "sign"
    with pytest.raises(BenchwalkError, match="name"):
        r.sign(" ")
    r.sign("J. Lead")
    last = s.journal.step_history()[-2]
    assert (
        last["step"] == "sign-off" and last["state"] == "accepted" and last["operator"] == "J. Lead"
    )

    # manual step: the technician closes the tie by hand, then confirms
    v = r.view()
    assert v.step.id == "tie" and v.action == "confirm_operation" and v.mismatches == ("TIE",)
    assert v.to_operate == ("TIE",)  # what this manual step changes from the step before
    s.bench.operate_by_hand("TIE", "closed")
    r.confirm_operation()
    v = await until(s, in_state(State.REVIEWING))
    if v.action == "accept_with_reason":
        with pytest.raises(BenchwalkError, match="reason"):
            r.accept()
        r.accept("loop flow below the meter's class; recorded")
    else:
        r.accept()

    # note step
    with pytest.raises(BenchwalkError, match="empty"):
        r.note("")
    r.note("ambient 21 C")
    assert r.finished and r.view().action == "none"
    notes = [e[0] for e in s.journal._conn.execute("SELECT message FROM event WHERE kind='note'")]
    assert notes == ["ambient 21 C"]
    assert s.journal.resume_point() is None


@pytest.mark.slow
async def test_gate_block_and_allow_with_a_reversed_ct(make_session):
    # IEEE/common practice signature (REFERENCES.md section 2): a reversed phase-B CT makes
    # p.B negative, so the meter's P sum and the network balance at M2 cannot hold.
    s = await make_session(faults=["ct-reversed:M2:B"])
    r = s.runner
    await until(s, in_state(State.WAITING))
    r.capture()
    v = await until(s, in_state(State.REVIEWING))
    assert v.overall == "inconsistent" and v.action == "retake"
    assert v.results[0].status is Status.FAIL  # failures first
    assert any(x.subject == "M2" for x in v.results if x.status is Status.FAIL)
    with pytest.raises(BenchwalkError, match="does not allow accepting failures"):
        r.accept("I am sure")
    r.retake()
    assert r.state is State.SETTLING
    v = await until(s, in_state(State.REVIEWING))
    assert v.overall == "inconsistent"
    with pytest.raises(BenchwalkError, match="reason"):
        r.skip("  ")
    r.skip("M2 phase B CT polarity suspected; to be rewired")
    hist = states_of(s, "radial")
    assert hist[hist.index("retaken") :] == [
        "retaken",
        "settling",
        "capturing",
        "reviewing",
        "skipped",
    ]
    assert r.outcomes["radial"].status is Status.FAIL
    assert r.outcomes["radial"].outcome == "skipped"
    assert r.verdict().word == "FAIL"

    # remote step, then hold, then the gate-allow manual step: accept needs a reason
    r.request_remote("RX", "closed")
    await r.confirm_remote("RX", "closed", "T. Tester")
    await until(s, in_state(State.REVIEWING))
    r.skip("fault under investigation")
    # the hold point covers both skipped steps: no silent signature over them
    v = r.view()
    assert v.hold_scope == ("radial", "rx-in")
    assert [i.split(":")[0] for i in v.hold_issues] == ["radial skipped", "rx-in skipped"]
    with pytest.raises(BenchwalkError, match="acknowledge"):
        r.sign("J. Lead")
    r.sign("J. Lead", acknowledge=True)
    from meas.journal.read import JournalView

    jv = JournalView(s.journal.path)
    ack = [e for e in jv.events() if e.kind == "hold_acknowledged"]
    jv.close()
    assert len(ack) == 1 and "radial skipped" in ack[0].message
    s.bench.operate_by_hand("TIE", "closed")
    r.confirm_operation()
    v = await until(s, in_state(State.REVIEWING))
    assert v.action == "accept_with_reason"
    with pytest.raises(BenchwalkError, match="give a reason"):
        r.accept()
    r.accept("known CT fault on M2; rest of the bench recorded")
    hist = [h for h in s.journal.step_history() if h["step"] == "tie"]
    assert hist[-1]["state"] == "accepted" and hist[-1]["outcome"] == "accepted_with_failures"
    assert hist[-1]["reason"].startswith("known CT fault")


@pytest.mark.slow
async def test_manual_mismatch_returns_to_waiting(make_session):
    s = await make_session()
    r = s.runner
    await until(s, in_state(State.WAITING))
    r.capture()
    await until(s, in_state(State.REVIEWING))
    r.accept()
    r.request_remote("RX", "closed")
    await r.confirm_remote("RX", "closed", "T. Tester")
    await until(s, in_state(State.REVIEWING))
    r.accept()
    r.sign("J. Lead")
    # confirm without operating the tie: verification times out and asks again
    r.confirm_operation()
    v = await until(s, lambda v: v.state is State.WAITING and v.message, timeout_s=10)
    assert "TIE is open, expected closed" in v.message
    assert not r.stopped


@pytest.mark.slow
async def test_remote_status_mismatch_stops_the_sequence(make_session):
    # RX's mechanism made slower than the verify timeout: the command "fails" to take effect
    def slow_rx(text: str) -> str:
        text = fast_profile_text(text, verify_timeout_s=0.3)
        return text.replace(
            'command_coil = 4\nstatus = { kind = "discrete", address = 4 }\noperate_time_s = 0.1',
            'command_coil = 4\nstatus = { kind = "discrete", address = 4 }\noperate_time_s = 2.0',
        )

    s = await make_session(edit=slow_rx)
    assert (
        s.profile.switch("RX").operate_time_s == 2.0 and s.profile.control.verify_timeout_s == 0.3
    )
    r = s.runner
    await until(s, in_state(State.WAITING))
    r.capture()
    await until(s, in_state(State.REVIEWING))
    r.accept()
    r.request_remote("RX", "closed")
    await r.confirm_remote("RX", "closed", "T. Tester")
    assert r.stopped and r.done
    assert "RX" in r.message
    assert states_of(s, "rx-in")[-1] == "stopped"
    assert s.journal.resume_point() == "rx-in"
    with pytest.raises(BenchwalkError):
        r.accept()


async def test_remote_refused_when_control_disabled(tmp_path):
    path = write_bench(
        tmp_path / "off", edit=lambda t: t.replace("enabled = true ", "enabled = false ", 1)
    )
    # the session refuses a sequence with remote steps when control is off
    with pytest.raises(ProfileError, match="control is disabled"):
        await Session.new(path, "T. Tester", sessions_dir=tmp_path / "s", simulate=True)
    # and the runner refuses a remote request on its own, before any write

    from meas.journal.store import Journal

    profile = load_profile(path)
    with Journal.create(tmp_path / "j.sqlite", profile, operator="T") as j:
        r = Runner(profile, j, checks=lambda snap, hist: [], settle_factory=None, start_index=1)
        assert r.step.id == "rx-in"
        with pytest.raises(BenchwalkError, match="control is disabled"):
            r.request_remote("RX", "closed")


def test_review_takes_the_median_status_per_check():
    # statuses chosen to exercise the rule (no measured values involved)
    from meas.results import CheckResult
    from meas.walk.capture import median_per_subject

    def batch(*statuses):
        return [CheckResult("meter.p_sum", "M1", st) for st in statuses]

    f, p, w = Status.FAIL, Status.PASS, Status.WARN
    one_outlier = median_per_subject([batch(f), batch(p), batch(p)])
    assert [r.status for r in one_outlier] == [Status.PASS]
    persistent = median_per_subject([batch(f), batch(f), batch(p)])
    assert [r.status for r in persistent] == [Status.FAIL]
    two = median_per_subject([batch(f), batch(w)])  # of two, both must fail to fail the step
    assert [r.status for r in two] == [Status.WARN]


SLOW_CAPTURE_SEQUENCE = """
[[step]]
id = "radial"
title = "Radial base case"
kind = "capture"
instruction = "Check the bench is radial, then capture."
expect = { CB1 = "closed", SW2 = "closed", SW3 = "closed", TIE = "open", RX = "open", LB2 = "closed" }
capture = { snapshots = 20, interval_s = 0.1, settle = { window_s = 0.5, rel_spread = 0.01, timeout_s = 6.0 } }
"""


def step_events(s: Session, step_id: str) -> list[str]:
    return [
        e[0]
        for e in s.journal._conn.execute(
            "SELECT kind FROM event WHERE step=? ORDER BY id", (step_id,)
        )
    ]


async def capturing(make_session, verify_timeout_s: float = 3.0) -> Session:
    """A session on SLOW_CAPTURE_SEQUENCE whose radial step has just begun capturing."""
    s = await make_session(
        SLOW_CAPTURE_SEQUENCE,
        edit=lambda t: fast_profile_text(t, verify_timeout_s=verify_timeout_s),
    )
    await until(s, in_state(State.WAITING))
    s.runner.capture()
    await until(s, in_state(State.CAPTURING))
    return s


@pytest.mark.slow
async def test_a_plc_missing_polls_holds_the_capture_instead_of_aborting_it(make_session):
    # A PLC that misses a few polls (a busy CPU, a gateway retry) leaves the switch states
    # unknown: that proves no change of configuration, so the step must hold, not start over.
    from meas.sim.faults import parse_faults

    s = await capturing(make_session, verify_timeout_s=3.0)
    s.bench.set_faults(parse_faults(["offline:PLC1"]))
    v = await until(s, lambda v: "not read" in v.message, timeout_s=5)
    assert v.state is State.CAPTURING and "CB1" in v.message
    s.bench.set_faults(())
    v = await until(s, in_state(State.REVIEWING, State.WAITING), timeout_s=15)
    assert v.state is State.REVIEWING, v.message
    kinds = step_events(s, "radial")
    assert "status_unread" in kinds
    assert "config_changed" not in kinds and "status_lost" not in kinds
    # no capture was taken while the status was unread: every capture row has a known state
    rows = s.journal._conn.execute(
        "SELECT id FROM snapshot WHERE role='capture' AND step='radial'"
    ).fetchall()
    assert len(rows) == 20
    for (row,) in rows:
        assert "unknown" not in s.journal.read_snapshot(row).switches.values()


@pytest.mark.slow
async def test_a_plc_silent_past_the_verify_timeout_sends_the_step_back(make_session):
    from meas.sim.faults import parse_faults

    s = await capturing(make_session, verify_timeout_s=0.6)
    s.bench.set_faults(parse_faults(["offline:PLC1"]))
    v = await until(s, in_state(State.WAITING), timeout_s=8)
    assert "not read for" in v.message and "check the PLC" in v.message
    kinds = step_events(s, "radial")
    assert "status_lost" in kinds and "config_changed" not in kinds
    assert not s.runner.stopped


async def test_a_status_read_in_the_wrong_state_still_sends_the_step_back_at_once(make_session):
    s = await capturing(make_session)
    s.bench.operate_by_hand("TIE", "closed")
    v = await until(s, in_state(State.WAITING), timeout_s=5)
    assert "TIE is closed, expected open" in v.message
    assert "config_changed" in step_events(s, "radial")


async def test_a_capture_with_the_plc_silent_asks_to_check_the_plc_not_the_switches(make_session):
    s = await make_session(
        edit=lambda t: fast_profile_text(t, verify_timeout_s=0.5), faults=["offline:PLC1"]
    )
    r = s.runner
    await until(s, in_state(State.WAITING))
    r.capture()
    v = await until(s, lambda v: v.state is State.WAITING and v.message, timeout_s=8)
    assert (
        "CB1 not read, expected closed" in v.message and "check the PLC and its link" in v.message
    )
    assert "set the switches" not in v.message
    assert states_of(s, "radial") == ["waiting"]  # never verified, so never settled or captured


ONE_STEP = SLOW_CAPTURE_SEQUENCE.replace("snapshots = 20", "snapshots = 2")


@pytest.mark.parametrize(
    "decision, code, word",
    [
        # the invented radial bench: M4's and M6's CT ratios have no other reading that
        # predicts them in this one configuration, so the pass says so (exit 0)
        (
            "accept",
            0,
            "PASS with unverified readings: all 1 steps passed; 2 reading(s) unverified: "
            "radial M4: M4 CT ratio: no other reading predicts it; "
            "radial M6: M6 CT ratio: no other reading predicts it",
        ),
        ("skip", 1, "INCOMPLETE: 1 of 1 steps skipped (radial)"),
    ],
)
async def test_a_skipped_step_makes_the_session_incomplete_not_a_pass(
    make_session, decision, code, word
):
    import io

    from tui.commands.headless import summarize

    s = await make_session(ONE_STEP, name=decision)
    r = s.runner
    await until(s, in_state(State.WAITING))
    if decision == "accept":
        r.capture()
        await until(s, in_state(State.REVIEWING))
        r.accept()
    else:
        r.skip("bench not available today")
    assert r.finished
    assert r.view().next_action == f"The sequence is complete. Verdict {word}."
    assert r.view().verdict == word
    out = io.StringIO()
    assert summarize(s, out) == code
    text = out.getvalue()
    assert text.rstrip().endswith(f"Session {s.session_id}: {word}")
    # the step's outcome line never says pass for a skipped step
    step_line = next(line for line in text.splitlines() if line.strip().startswith("radial"))
    assert ("skipped" in step_line and "pass" not in step_line) is (decision == "skip")
    log = [(h["state"], h["outcome"]) for h in s.journal.step_history() if h["step"] == "radial"]
    assert log[-1] == (("skipped", "skipped") if decision == "skip" else ("accepted", "passed"))


@pytest.mark.slow
async def test_the_demo_technician_gives_up_on_a_silent_plc_and_the_run_ends_incomplete(
    make_session,
):
    import io

    from tui.commands.headless import drive
    from tui.commands.technicians import SimTechnician

    sequence = ONE_STEP + TEST_SEQUENCE.split("[[step]]", 3)[2].join(
        ["[[step]]", ""]
    )  # + the remote RX step
    s = await make_session(
        sequence, edit=lambda t: fast_profile_text(t, verify_timeout_s=0.3), faults=["offline:PLC1"]
    )
    out = io.StringIO()
    code = await drive(s, SimTechnician(s, out=out, attempts=2), out)
    text = out.getvalue()
    assert code == 1, text
    assert "gave up after 2 tries" in text and "check the PLC and its link" in text
    assert (
        "remote command refused" in text
        and "no command is sent while switch status cannot be read" in text
    )
    assert [
        c for c in s.bench.plc.commands if c[3] != "hand"
    ] == []  # nothing was switched remotely
    assert "INCOMPLETE: 2 of 2 steps skipped (radial, rx-in)" in text


LB2_OUT = """
[[step]]
id = "lb2-out"
title = "Load bank 2 out"
kind = "manual"
instruction = "Open LB2 by hand."
expect = { LB2 = "open" }
capture = { snapshots = 2, interval_s = 0.2, settle = { window_s = 1.0, rel_spread = 0.01, timeout_s = 20.0 } }

[[step]]
id = "steady"
title = "Steady"
kind = "capture"
instruction = "Capture again."
expect = { LB2 = "open" }
capture = { snapshots = 2, interval_s = 0.2 }
"""


@pytest.mark.slow
async def test_live_noise_is_not_judged_on_a_switching_transient(make_session):
    # The demo's poll (0.2 s) and a slow transient (1.5 s, first order): the curvature of M5's
    # falling current reads as several times its class scatter, so judging noise on it would
    # blame a loose connection. Live noise waits for the readings to settle, as captures do.
    def demo_timing(text: str) -> str:
        text = text.replace("settle_s = 0.1 ", "settle_s = 1.5 ", 1)
        return text.replace("[poll]\ninterval_s = 0.1", "[poll]\ninterval_s = 0.2", 1)

    s = await make_session(LB2_OUT, edit=demo_timing)
    assert s.profile.sim["settle_s"] == 1.5 and s.profile.poll.interval_s == 0.2
    r = s.runner

    na = CheckResult("quality.noise", "M5", Status.NA, message="no live result yet")

    def m5_noise(v):
        return next((x for x in v.results if x.check == "quality.noise" and x.subject == "M5"), na)

    await until(s, lambda v: m5_noise(v).status is Status.PASS, timeout_s=20)
    s.bench.operate_by_hand("LB2", "open")  # the technician opens it; has not confirmed yet
    seen: list[CheckResult] = []
    t_end = time.monotonic() + 4.0
    overall_seen: set[str] = set()
    await until(
        s,
        lambda v: (
            seen.append(m5_noise(v)) or overall_seen.add(v.overall) or time.monotonic() > t_end
        ),
        timeout_s=10,
    )
    assert "settling" in overall_seen  # still waiting for the confirm, but the readings move
    r.confirm_operation()
    await until(s, lambda v: seen.append(m5_noise(v)) or v.state is State.REVIEWING, timeout_s=25)
    fails = [x.message for x in seen if x.status is Status.FAIL]
    assert not fails, fails[:2]
    assert any(x.message == "not judged while the readings settle after switching" for x in seen)
    r.accept()  # the next step waits with the bench steady: live noise is judged again
    await until(s, lambda v: v.index == 1 and m5_noise(v).status is Status.PASS, timeout_s=20)


@pytest.mark.slow
async def test_a_remote_first_step_runs_headless_to_a_pass(make_session):
    # drive() and the demo technician both wait for the first poll: before it no status is known
    import io

    from tui.commands.headless import drive
    from tui.commands.technicians import SimTechnician

    remote_first = TEST_SEQUENCE.split("[[step]]", 3)[2].join(
        ["[[step]]", ""]
    )  # the remote RX step alone
    s = await make_session(remote_first)
    out = io.StringIO()
    code = await drive(s, SimTechnician(s, out=out), out)
    text = out.getvalue()
    assert code == 0, text
    assert "refused" not in text and "skipped" not in text
    assert [c[1:3] for c in s.bench.plc.commands if c[3] != "hand"] == [("RX", "closed")]


# The commands offered in each (state, next action): the console enables exactly these keys.
# Derived by hand from the runner's command guards (``meas.walk.runner``): note at any time,
# stop until the sequence is over, skip in every state of an open step.
ALWAYS = {"note", "stop"}
ALLOWED_BY_HAND = [
    (State.WAITING, "capture", False, {"capture", "skip"} | ALWAYS),
    (State.WAITING, "confirm_operation", False, {"confirm_operation", "skip"} | ALWAYS),
    (State.WAITING, "request_remote", False, {"request_remote", "skip"} | ALWAYS),
    (State.WAITING, "request_remote", True, {"request_remote", "confirm_remote", "skip"} | ALWAYS),
    (State.WAITING, "sign", False, {"sign", "skip"} | ALWAYS),
    (State.WAITING, "note", False, {"skip"} | ALWAYS),
    (State.OPERATING, "wait", False, ALWAYS),
    (State.VERIFYING, "wait", False, {"skip"} | ALWAYS),
    # capture while settling only once the settle timeout has passed
    (State.SETTLING, "wait", False, {"retake", "skip"} | ALWAYS),
    (State.CAPTURING, "wait", False, {"skip"} | ALWAYS),
    (State.REVIEWING, "accept", False, {"accept", "retake", "skip"} | ALWAYS),
    (State.REVIEWING, "accept_with_reason", False, {"accept", "retake", "skip"} | ALWAYS),
    (State.REVIEWING, "retake", False, {"retake", "skip"} | ALWAYS),  # failed, gate block
    (State.FINISHED, "none", False, {"note"}),
    (State.STOPPED, "none", False, {"note"}),
]


@pytest.mark.parametrize(("state", "action", "pending", "allowed"), ALLOWED_BY_HAND)
def test_the_view_allows_the_commands_of_each_state(state, action, pending, allowed):
    from meas.walk.states import COMMANDS
    from meas.walk.view import allowed_now

    got = allowed_now(state, action, pending)
    assert got == frozenset(allowed)
    assert got <= set(COMMANDS)


def test_capture_while_settling_only_after_the_timeout_and_no_retake_without_a_capture():
    from meas.walk.view import allowed_now

    timed_out = allowed_now(State.SETTLING, "retake", False, settle_timed_out=True)
    assert timed_out == frozenset({"capture", "retake", "skip"} | ALWAYS)
    # a step with no capture policy reviews nothing to retake (a manual step without capture)
    no_capture = allowed_now(State.REVIEWING, "accept", False, captures=False)
    assert no_capture == frozenset({"accept", "skip"} | ALWAYS)


@pytest.mark.slow
async def test_every_command_the_view_does_not_allow_is_refused_without_a_trace(make_session):
    # A whole walk of the test sequence by the demo technician; at every view each command
    # outside ``allowed`` is tried and must be refused, leaving the picture as it was.
    import io

    from tui.commands.technicians import SimTechnician

    s = await make_session()
    r = s.runner
    tech = SimTechnician(s, out=io.StringIO())
    probes = {
        "confirm_operation": r.confirm_operation,
        "request_remote": lambda: r.request_remote("RX", "closed"),
        "capture": r.capture,
        "retake": r.retake,
        "skip": lambda: r.skip("probe"),
        "accept": lambda: r.accept("probe"),
        "sign": lambda: r.sign("probe"),
    }
    seen: set[tuple[State, str]] = set()
    deadline = time.monotonic() + 60 * WALL_PER_SIM_S
    async with contextlib.aclosing(s.views()) as views:
        async for v in views:
            assert time.monotonic() < deadline, (v.state, v.step)
            assert v.allowed == r.view().allowed
            for name, call in probes.items():
                if name not in v.allowed:
                    with pytest.raises(BenchwalkError):
                        call()
                    assert r.view() == v, f"{name} left a trace in {v.state}"
            if "confirm_remote" not in v.allowed:
                with pytest.raises(BenchwalkError):
                    await r.confirm_remote("RX", "closed", "probe")
                assert r.view() == v
            seen.add((v.state, v.action))
            if r.done:
                break
            await tech.act(r, v)
    assert r.finished, r.message
    states = {st for st, _ in seen}
    assert {State.WAITING, State.SETTLING, State.CAPTURING, State.REVIEWING} <= states
    assert {"capture", "request_remote", "sign", "confirm_operation", "note", "accept"} <= {
        a for _, a in seen
    }


async def test_unverified_readings_reach_the_journal_and_the_dataset_verdict(
    make_session, tmp_path
):
    """The console's verdict, the journal (for a resume) and the exported dataset agree on
    the readings nothing could verify (the invented radial bench: M4's and M6's CT ratios)."""
    import json

    s = await make_session(ONE_STEP, name="unverified")
    r = s.runner
    await until(s, in_state(State.WAITING))
    r.capture()
    await until(s, in_state(State.REVIEWING))
    r.accept()
    assert r.finished
    live = r.verdict()
    assert live.word == "PASS with unverified readings" and live.exit_code == 0
    deadline = time.monotonic() + 10.0  # the journal writes in the background
    while not s.journal.unverified_by_step():
        assert time.monotonic() < deadline, "readings_unverified never journalled"
        await asyncio.sleep(0.05)
    assert s.journal.unverified_by_step() == {"radial": list(live.unverified)}
    dataset, _ = s.export(tmp_path / "out")
    meta = json.loads((dataset / "datapackage.json").read_text())["benchwalk"]["verdict"]
    assert meta["verdict"] == live.word and meta["unverified"] == list(live.unverified)
