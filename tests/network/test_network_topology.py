"""The one live-bus rule (``meas.network.topology``) and the network package's layering.

Demo topology (profiles_demo/feeder_bench.toml): SRC at B0; CB1 (L1) B0-B1; SW2 (L2) B1-B2;
SW3 (L3) B1-B3; TIE (L4) B2-B3; LB2 switches load LD2 at B3. Expected sets are read off that
drawing by hand.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from meas.network.topology import branch_conducts, energization, live_buses, settled_states
from meas.profile import load_profile

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"


@pytest.fixture(scope="module")
def demo():
    return load_profile(DEMO)


def test_network_package_never_imports_the_simulator():
    for path in sorted((ROOT / "meas" / "network").glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                name = ("." * node.level) + (node.module or "")
                assert not name.startswith(("meas.sim", "..sim")), (path.name, name)
            elif isinstance(node, ast.Import):
                assert not any(a.name.startswith("meas.sim") for a in node.names), path.name


def test_a_branch_conducts_only_with_every_switch_closed(demo):
    on = branch_conducts(demo, {"CB1": "closed", "SW2": "open", "SW3": "unknown"})
    assert on["SRC"] is True  # no switch
    assert on["L1"] is True and on["L2"] is False and on["L3"] is None
    assert on["L4"] is None  # TIE not reported at all: unknown, not its normal state


def test_unknown_switches_split_live_from_maybe_live(demo):
    states = {s.id: "closed" for s in demo.switches} | {"SW2": "open", "SW3": "unknown"}
    states["TIE"] = "open"
    assert live_buses(demo, states) == {"B0", "B1"}
    assert live_buses(demo, states, unknown_conducts=True) == {"B0", "B1", "B3"}


def test_energization_names_the_feeding_branch_in_walk_order(demo):
    states = settled_states(demo, {"SW2": "open", "TIE": "closed"})
    fed = energization(demo, branch_conducts(demo, states), unknown_conducts=False)
    assert fed == {
        "B0": ("SRC", None),
        "B1": ("L1", "B0"),
        "B3": ("L3", "B1"),
        "B2": ("L4", "B3"),
    }
    assert list(fed)[:2] == ["B0", "B1"]


def test_settled_states_fill_normal_states(demo):
    states = settled_states(demo, {"TIE": "closed"})
    assert list(states) == [s.id for s in demo.switches]
    assert states["TIE"] == "closed"
    assert all(states[s.id] == s.normal for s in demo.switches if s.id != "TIE")
