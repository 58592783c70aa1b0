"""Sequence helpers over the demo sequence and over broken copies of it (real TOML files)."""

from __future__ import annotations

from pathlib import Path

import pytest

from meas.errors import ProfileError
from meas.profile import load_profile
from meas.walk.sequence import (
    changes,
    configuration_after,
    configuration_before,
    configurations,
    distinct_configurations,
    expected_for,
    sequence_problems,
    validate_sequence,
)

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"
SEQ = DEMO.with_name("feeder_bench.sequence.toml")


@pytest.fixture(scope="module")
def demo():
    return load_profile(DEMO)


def copy_with_sequence(tmp_path: Path, sequence_text: str, profile_edit=None) -> Path:
    text = DEMO.read_text()
    if profile_edit:
        text = profile_edit(text)
    (tmp_path / "feeder_bench.toml").write_text(text)
    (tmp_path / "feeder_bench.sequence.toml").write_text(sequence_text)
    return tmp_path / "feeder_bench.toml"


def test_demo_sequence_is_clean_and_long_enough(demo):
    assert sequence_problems(demo) == []
    validate_sequence(demo)  # does not raise
    assert len(demo.steps) >= 10
    kinds = {s.kind for s in demo.steps}
    assert kinds == {"manual", "remote", "capture", "hold", "note"}
    for s in demo.steps:
        assert s.instruction.strip(), s.id


def test_demo_visits_every_switch_state(demo):
    # every switch of the demo bench is seen both open and closed somewhere in the walk
    seen = {sw.id: set() for sw in demo.switches}
    for c in configurations(demo):
        for sid, state in c.items():
            seen[sid].add(state)
    assert all(v == {"open", "closed"} for v in seen.values()), seen


def test_demo_configurations_named_in_the_plan(demo):
    # the configurations the demo plan promises (designed for this bench, see the sequence file)
    confs = distinct_configurations(demo)
    dead = dict.fromkeys(["CB1", "SW2", "SW3", "TIE", "RX", "LB2"], "open")
    radial = {
        "CB1": "closed",
        "SW2": "closed",
        "SW3": "closed",
        "TIE": "open",
        "RX": "open",
        "LB2": "closed",
    }
    meshed = {**radial, "TIE": "closed", "RX": "closed"}
    transfer = {**meshed, "SW3": "open"}
    for c in (dead, radial, meshed, transfer):
        assert c in confs, c
    assert configurations(demo)[0] == dead
    # the last step de-energizes: CB1 open again
    assert configurations(demo)[-1]["CB1"] == "open"


def test_configuration_accumulates_and_changes(demo):
    i = [s.id for s in demo.steps].index("transfer-lb2")
    before, after = configuration_before(demo, i), configuration_after(demo, i)
    assert before["SW3"] == "closed" and after["SW3"] == "open"
    assert changes(demo, i) == {"SW3": "open"}
    assert expected_for(demo, i) == after
    # all other switches carried over unchanged
    assert {k: v for k, v in after.items() if k != "SW3"} == {
        k: v for k, v in before.items() if k != "SW3"
    }
    assert configuration_before(demo, 0) == {}
    # hold and note steps change nothing
    for j, s in enumerate(demo.steps):
        if s.kind in ("hold", "note", "capture") and j > 0:
            assert changes(demo, j) == {}, s.id


def test_unreachable_expectation_is_reported(tmp_path):
    # a capture step at the end expects CB1 closed although de-energize opened it
    text = SEQ.read_text()
    text += '\n[[step]]\nid = "bogus-capture"\ntitle = "t"\nkind = "capture"\nexpect = { CB1 = "closed" }\n'
    profile = load_profile(copy_with_sequence(tmp_path, text))
    problems = [str(p) for p in sequence_problems(profile)]
    assert len(problems) == 1, problems
    assert "bogus-capture" in problems[0] and "CB1 is open" in problems[0]
    with pytest.raises(ProfileError):
        validate_sequence(profile)


def test_repeated_operation_and_empty_manual_step(tmp_path):
    text = SEQ.read_text()
    text += (
        '\n[[step]]\nid = "again"\ntitle = "t"\nkind = "remote"\noperate = { CB1 = "open" }\n'
        '\n[[step]]\nid = "idle"\ntitle = "t"\nkind = "manual"\nexpect = { CB1 = "open" }\n'
    )
    profile = load_profile(copy_with_sequence(tmp_path, text))
    problems = [str(p) for p in sequence_problems(profile)]
    assert any("again" in p and "already open" in p for p in problems), problems
    assert any("idle" in p and "changes no switch" in p for p in problems), problems


def test_remote_steps_need_control_enabled(tmp_path):
    path = copy_with_sequence(
        tmp_path,
        SEQ.read_text(),
        lambda t: t.replace("enabled = true ", "enabled = false ", 1),
    )
    profile = load_profile(path)
    assert profile.control.enabled is False
    problems = [str(p) for p in sequence_problems(profile)]
    remote_ids = [s.id for s in profile.steps if s.kind == "remote"]
    assert remote_ids and all(
        any(r in p and "control is disabled" in p for p in problems) for r in remote_ids
    )


def test_remote_switch_changed_by_hand_is_reported(tmp_path):
    # a manual step that expects the remote reactor contactor to change: use a remote step
    text = (
        SEQ.read_text()
        .replace(
            'kind = "remote"\ninstruction = """Close the reactor contactor RX',
            'kind = "manual"\ninstruction = """Close the reactor contactor RX',
        )
        .replace('operate = { RX = "closed" }', 'expect = { RX = "closed" }')
    )
    profile = load_profile(copy_with_sequence(tmp_path, text))
    problems = [str(p) for p in sequence_problems(profile)]
    assert len(problems) == 1 and "reactor-in" in problems[0] and "remote switch" in problems[0], (
        problems
    )
