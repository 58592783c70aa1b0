"""Whether the network model's load flow converges everywhere the walk will take the bench.

The simulated bench solves the profile's model in its normal switch state at start-up and again
after every switching operation; a model whose flow diverges there (a load beyond what the line
and source can carry) would stop ``sim`` or ``demo`` mid-sequence. ``lint`` asks this module
first, so the problem is found at the step that causes it, before anything starts. A profile
without a complete model (a real bench that only records) has nothing to solve and no problem.
"""

from __future__ import annotations

from ..errors import Problem, ProfileError
from ..model import Profile
from ..network.loadflow import SolverError
from ..network.readings import ideal_readings
from .sequence import configurations


def load_flow_problems(profile: Profile) -> list[Problem]:
    """One problem per configuration (normal state, then each step's) whose flow diverges."""
    if any(br.model is None for br in profile.branches):
        return []
    out: list[Problem] = []
    seen: set[tuple[tuple[str, str], ...]] = set()
    targets: list[tuple[str, dict[str, str]]] = [("model", {})]
    targets += [
        (f"step[{n}] {step.id}", dict(config))
        for n, (step, config) in enumerate(zip(profile.steps, configurations(profile), strict=True))
    ]
    for path, config in targets:
        key = tuple(sorted(config.items()))
        if key in seen:
            continue
        seen.add(key)
        try:
            ideal_readings(profile, config)
        except ProfileError:
            return []  # the model itself is incomplete: the loader's problems say why
        except SolverError as why:
            where = (
                "the normal switch state"
                if path == "model"
                else "the configuration this step leaves"
            )
            out.append(
                Problem(
                    str(profile.path),
                    None,
                    path,
                    f"the network model's load flow does not converge in {where}, so the "
                    f"simulated bench cannot run it: {why}",
                )
            )
    return out
