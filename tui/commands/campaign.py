"""``benchwalk campaign PROFILE``: before switching anything, what the sequence can calibrate.

From the profile's model, its sequence, the meters' classes and an assumed repeatability: which
parameters the planned steps will measure, which stay at their prior, and which added step (a
switch configuration the profile's switches allow) would help most. No device is touched.
"""

from __future__ import annotations

import os

# The fit works on small dense matrices: BLAS threads only oversubscribe a shared machine (they
# made a fit 7x slower here; see benchmarks/bench_solver.py). numpy is not imported yet.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
from pathlib import Path  # noqa: E402

from meas.calib.design import CampaignPlan, plan_campaign, proposal  # noqa: E402
from meas.calib.observations import DEFAULT_REPEATABILITY  # noqa: E402
from meas.errors import BenchwalkError  # noqa: E402
from meas.profile import load_profile  # noqa: E402

HELP = "before a campaign: which model parameters the sequence will calibrate, and what step to add"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("profile", metavar="PROFILE", type=Path, help="bench profile (TOML)")
    p.add_argument(
        "--skip",
        action="append",
        default=[],
        metavar="STEP",
        help="leave a step of the sequence out of the plan (repeatable)",
    )
    p.add_argument(
        "--param",
        action="append",
        default=[],
        metavar="BRANCH.KEY",
        help="parameters to consider, globs allowed (default: every parameter of the model)",
    )
    p.add_argument(
        "--repeatability",
        type=float,
        default=DEFAULT_REPEATABILITY,
        metavar="REL",
        help=f"assumed relative spread of one capture (default {DEFAULT_REPEATABILITY})",
    )
    p.add_argument(
        "--emf",
        choices=("shared", "per-step"),
        default="shared",
        help="plan for one source EMF (default) or one per step (a drifting supply)",
    )
    p.add_argument("--top", type=int, default=3, help="how many candidate steps to list")


def plan_lines(plan: CampaignPlan, top: int) -> list[str]:
    out = [
        f"{len(plan.steps)} planned capture steps: {', '.join(s.id for s in plan.steps)}",
        f"assumed repeatability {plan.repeatability:g} per capture; meter gains within class",
        f"{'parameter':<14}{'post/prior':>11}  verdict",
    ]
    out += [f"{e.name:<14}{e.ratio:>11.2f}  {e.verdict}" for e in plan.parameters]
    prior = plan.by_verdict("prior only")
    if prior:
        out.append("stay at their prior with this sequence: " + ", ".join(prior))
    for name, c in plan.best_for.items():
        out.append(f"to measure {name} (post/prior {c.ratios[name]:.2f}) add a step {proposal(c)}")
    if plan.candidates:
        out.append("added steps that help most overall:")
        for c in plan.candidates[: max(0, top)]:
            out.append(f"  information gain {c.gain:.2f}: {proposal(c)}")
    return out


def main(args: argparse.Namespace) -> int:
    if not 0.0 < args.repeatability < 0.5:
        raise BenchwalkError("--repeatability is a relative spread, e.g. 0.0005 for 0.05 %")
    profile = load_profile(args.profile)
    plan = plan_campaign(
        profile,
        skip=args.skip,
        params=args.param,
        repeatability=args.repeatability,
        emf_per_step=args.emf == "per-step",
    )
    for line in plan_lines(plan, args.top):
        print(line)
    return 0
