"""The pre-campaign analysis on the demo bench (invented data): with no step that loads the tie,
the tie L4 stays at its prior and the analysis proposes a step that loads it
(CALIBRATION_NOTES.md §4.8 [C]: adding "LB2 fed via the tie" cut the tie R uncertainty from
18 % to 4.3 %)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from support.calib_bench import DEMO, demo_profile

from meas.calib.design import plan_campaign, proposal
from meas.errors import BenchwalkError
from meas.sim.readings import ideal_readings

TIE_STEPS = ("close-tie", "transfer-lb2", "restore-lateral")
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def without_tie():
    return plan_campaign(demo_profile(), skip=TIE_STEPS)


def test_tie_is_prior_only_without_a_step_that_loads_it(without_tie):
    prior = without_tie.by_verdict("prior only")
    assert {"L4.r_ohm", "L4.x_ohm"} <= set(prior)
    assert "L2.r_ohm" not in prior and "SRC.sc_va" not in prior


def test_proposes_a_step_that_loads_the_tie(without_tie):
    profile = demo_profile()
    best = without_tie.best_for["L4.r_ohm"]
    assert best.config.switches["TIE"] == "closed"
    tie_current = ideal_readings(profile, best.config.switches).meters["M4"]["i.A"]
    assert tie_current > 1.0  # amperes through the tie, not just its charging current
    assert best.ratios["L4.r_ohm"] < 0.5  # with the step added, L4.R is measured
    assert "close TIE" in proposal(best)
    assert without_tie.candidates[0].config.switches["TIE"] == "closed"


def test_the_demo_sequence_as_written_measures_the_tie():
    plan = plan_campaign(demo_profile())
    verdicts = {e.name: e.verdict for e in plan.parameters}
    assert verdicts["L4.r_ohm"] == "measured" and verdicts["L4.x_ohm"] == "measured"
    assert verdicts["L1.b_us"] == "prior only"  # LV charging never is (§0.3 [C])


def test_unknown_step_is_a_usage_error():
    with pytest.raises(BenchwalkError, match="not a step"):
        plan_campaign(demo_profile(), skip=("no-such-step",))


@pytest.mark.slow
def test_campaign_command_prints_the_proposal():
    args = [sys.executable, "-m", "tui.cli", "campaign", str(DEMO)]
    for s in TIE_STEPS:
        args += ["--skip", s]
    r = subprocess.run(args, capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "stay at their prior with this sequence:" in r.stdout and "L4.r_ohm" in r.stdout
    assert "to measure L4.r_ohm" in r.stdout and "close TIE" in r.stdout
