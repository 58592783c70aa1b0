"""Helpers over ``profile.steps``: the configuration each step leaves, and sequence checks.

The loader checks each step on its own; this module checks the walk as a whole: every
expected state must be reached by an operation of the step (a command of a remote step, a
hand operation of a manual step) or carried over from earlier steps; capture, hold and note
steps change nothing; remote steps need control enabled. A sequence that passes can be run
end to end without a surprise.
"""

from __future__ import annotations

from ..errors import Problem, ProfileError
from ..model import Profile, Step, SwitchState

# switch id -> the state a step leaves it in (or must find it in)
Configuration = dict[str, SwitchState]


def _apply(config: Configuration, step: Step) -> Configuration:
    out = dict(config)
    out.update(step.operate)
    out.update(step.expect)
    return out


def configurations(profile: Profile) -> list[Configuration]:
    """The switch configuration each step leaves the bench in, in step order.

    It accumulates: a step states only what it changes or cares about; switches it does not
    mention keep the state an earlier step gave them. Before the first step nothing is known.
    """
    out: list[Configuration] = []
    config: Configuration = {}
    for step in profile.steps:
        config = _apply(config, step)
        out.append(config)
    return out


def configuration_after(profile: Profile, index: int) -> Configuration:
    """The configuration the bench is in once step ``index`` is done."""
    return configurations(profile)[index] if profile.steps else {}


def configuration_before(profile: Profile, index: int) -> Configuration:
    """The configuration the bench is in when step ``index`` starts (empty for the first)."""
    return configurations(profile)[index - 1] if index > 0 else {}


def expected_for(profile: Profile, index: int) -> Configuration:
    """Every switch state the step at ``index`` must find before it captures."""
    return configuration_after(profile, index)


def distinct_configurations(profile: Profile) -> list[Configuration]:
    """Configurations visited, first occurrence order, duplicates dropped."""
    seen: list[Configuration] = []
    for c in configurations(profile):
        if c not in seen:
            seen.append(c)
    return seen


def find_step(profile: Profile, step_id: str) -> int:
    for i, s in enumerate(profile.steps):
        if s.id == step_id:
            return i
    raise KeyError(step_id)


def changes(profile: Profile, index: int) -> Configuration:
    """The switch states step ``index`` changes: commands of a remote step, hand operations
    of a manual step (its ``expect`` entries that differ from the carried configuration)."""
    before = configuration_before(profile, index)
    return {s: v for s, v in expected_for(profile, index).items() if before.get(s) != v}


def sequence_problems(profile: Profile) -> list[Problem]:
    """Everything wrong with the walk as a whole; empty when it can run end to end.

    The loader already checks each step alone (known switches, operate only in remote steps on
    remote switches, operate agrees with expect); this adds what needs the whole walk.
    """
    problems: list[Problem] = []
    switches = {s.id: s for s in profile.switches}
    config: Configuration = {}

    def add(i: int, step: Step, path: str, message: str) -> None:
        problems.append(Problem(profile.path, None, f"step[{i}] {step.id}: {path}", message))

    if not profile.steps:
        problems.append(Problem(profile.path, None, "sequence", "the sequence has no steps"))
    for i, step in enumerate(profile.steps):
        for sid in [*step.expect, *step.operate]:
            if sid not in switches:
                add(i, step, sid, f"no switch {sid} in the profile")
        if step.kind == "remote" and step.operate and not profile.control.enabled:
            add(
                i,
                step,
                "operate",
                "control is disabled in the profile; make this step manual "
                "(operated by hand) or enable control",
            )
        for sid, state in step.operate.items():
            sw = switches.get(sid)
            if sw is not None and (sw.operation != "remote" or sw.command_coil is None):
                add(
                    i, step, f"operate.{sid}", f"{sid} has no command coil; put it in a manual step"
                )
            if config.get(sid) == state:
                add(i, step, f"operate.{sid}", f"{sid} is already {state} from an earlier step")
        if i > 0:
            for sid, state in step.expect.items():
                before = config.get(sid)
                if sid in step.operate or before is None or before == state:
                    continue
                sw = switches.get(sid)
                if step.kind != "manual":
                    add(
                        i,
                        step,
                        f"expect.{sid}",
                        f"{sid} is {before} after the earlier steps and "
                        f"a {step.kind} step does not operate it; use a manual or remote step",
                    )
                elif sw is not None and sw.operation == "remote" and profile.control.enabled:
                    add(
                        i,
                        step,
                        f"expect.{sid}",
                        f"{sid} is a remote switch; operate it from a "
                        "remote step so the command and its verification are recorded",
                    )
        if step.kind in ("manual", "remote") and i > 0 and not changes(profile, i):
            add(i, step, "expect", f"this {step.kind} step changes no switch")
        config = _apply(config, step)
    return problems


def validate_sequence(profile: Profile) -> None:
    """Raise ``ProfileError`` listing every sequence problem."""
    problems = sequence_problems(profile)
    if problems:
        raise ProfileError(problems)
