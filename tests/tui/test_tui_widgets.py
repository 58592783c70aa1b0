"""Console widgets as pure functions over the demo profile and simulated-bench snapshots.

Snapshots come from ``meas.sim.meters.snapshot_from_sim`` (the real load flow, no noise), so
the figures the widgets show are the bench's own, not invented numbers.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
from textual.binding import Binding

from meas.network.topology import live_buses
from meas.profile import load_profile
from meas.results import CheckResult, Status
from meas.sim.faults import parse_fault
from meas.sim.meters import snapshot_from_sim
from meas.snapshot import CommState
from tui.frame import StepInfo
from tui.keys import KEYS, bindings
from tui.screens.coverage import CoverageScreen
from tui.screens.safety import SafetyScreen
from tui.units import eng, scale_factor
from tui.widgets.checks import checks_text
from tui.widgets.coverage import _short
from tui.widgets.phasor import phasor_canvas, phasor_text
from tui.widgets.readings import row_cells
from tui.widgets.step import step_detail
from tui.widgets.trend import trend_rows, window_spread

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


@pytest.fixture(scope="module")
def profile():
    return load_profile(DEMO)


def _snap(profile, faults=(), switches=None):
    sw = switches or {s.id: s.normal for s in profile.switches}
    return snapshot_from_sim(
        profile,
        sw,
        tuple(parse_fault(f) for f in faults),
        np.random.default_rng(7),
        1,
        noise=False,
        t_mono=10.0,
        time_utc=datetime(2026, 12, 1, tzinfo=UTC),
    )


# ---------------------------------------------------------------- units


def test_per_unit_on_three_phase_base(profile):
    # Per-unit system (Grainger & Stevenson, Power System Analysis, ch. 2, from memory):
    # I_base = S_base / (sqrt(3) V_LL,base). Demo bench: S_base 30 kVA, V_LL 400 V ->
    # I_base = 43.30 A, V_LN,base = 230.94 V, phase power base S_base / 3 = 10 kVA.
    i_base = 30000.0 / (math.sqrt(3) * 400.0)
    assert i_base * scale_factor(profile, "B0", "i.A", "pu") == pytest.approx(1.0)
    assert 400.0 * scale_factor(profile, "B0", "v_ll.AB", "pu") == pytest.approx(1.0)
    assert 230.94 * scale_factor(profile, "B0", "v_ln.A", "pu") == pytest.approx(1.0, rel=1e-4)
    assert 10000.0 * scale_factor(profile, "B0", "p.A", "pu") == pytest.approx(1.0)
    assert 30000.0 * scale_factor(profile, "B0", "p.T", "pu") == pytest.approx(1.0)
    assert scale_factor(profile, "B0", "pf.T", "pu") == 1.0


def test_network_scale_keeps_power_consistent(profile):
    # S = sqrt(3) V_LL I must hold on both sides of the scale model (definition of
    # three-phase apparent power, IEEE 1459): 400 V / 43.30 A (30 kVA) -> 33 kV and 10 MVA.
    kv = scale_factor(profile, "B0", "v_ll.AB", "network")
    ki = scale_factor(profile, "B0", "i.A", "network")
    kp = scale_factor(profile, "B0", "p.T", "network")
    v, i = 400.0 * kv, (30000.0 / (math.sqrt(3) * 400.0)) * ki
    assert v == pytest.approx(33000.0)
    assert math.sqrt(3) * v * i == pytest.approx(30000.0 * kp)
    assert 30000.0 * kp == pytest.approx(10e6, rel=1e-6)


@pytest.mark.parametrize(
    "value, unit, text",
    [  # SI prefixes k, M, m: BIPM SI Brochure, 9th ed., Table 7
        (1234.5, "W", "1.23 kW"),
        (-6543.2, "var", "-6.54 kvar"),
        (33.0e6, "W", "33.0 MW"),
        (0.00123, "A", "1.23 mA"),
        (230.4, "V", "230 V"),
        (math.nan, "V", "--"),
    ],
)
def test_engineering_notation(value, unit, text):
    out = eng(value, unit, 11)
    assert len(out) == 11 and out.strip() == text


# ---------------------------------------------------------------- readings rows


def test_rows_show_the_simulated_values_and_comm_state(profile):
    snap = _snap(profile, faults=["offline:M5"])
    cells = row_cells(profile, "M1", snap.meters["M1"], "bench")
    p_t = snap.meters["M1"].get("p.T")
    assert cells[4].strip() == eng(p_t, "W").strip()
    assert cells[1].strip() == "ok"
    assert snap.meters["M5"].state is CommState.FAILING  # first unanswered cycle
    off = row_cells(profile, "M5", snap.meters["M5"], "bench")
    assert "failing" in off[1] and off[4].strip() == "--"
    # fixed widths: every row has the same length, so columns never jitter
    assert len("".join(cells)) == len("".join(off))


# ---------------------------------------------------------------- bench diagram


def test_energization_follows_closed_switches(profile):
    # Demo topology: SRC at B0; CB1 (L1) B0-B1; SW2 (L2) B1-B2; SW3 (L3) B1-B3; TIE (L4) B2-B3.
    states = {s.id: "open" for s in profile.switches}
    assert live_buses(profile, states) == {"B0"}
    states |= {"CB1": "closed", "SW2": "closed"}
    assert live_buses(profile, states) == {"B0", "B1", "B2"}
    states |= {"TIE": "closed"}  # B3 fed through the tie with the lateral open
    assert live_buses(profile, states) == {"B0", "B1", "B2", "B3"}
    states |= {"CB1": "unknown"}  # an unknown status is never drawn live
    assert live_buses(profile, states) == {"B0"}


# ---------------------------------------------------------------- phasors


def _tip(rows, ch):
    for y, row in enumerate(rows):
        if ch in row:
            return row.index(ch), y
    raise AssertionError(f"{ch} not drawn")


def test_canvas_places_tips_by_angle():
    rows = phasor_canvas(
        {"A": (1.0, 0.0), "B": (1.0, -120.0), "C": (1.0, 120.0)},
        {"A": (1.0, -30.0), "B": (1.0, 60.0), "C": (1.0, 90.0)},
        31,
        13,
    )
    cx, cy = 15, 6
    ax, ay = _tip(rows, "A")
    assert ay == cy and ax > cx  # 0 deg: to the right
    bx, by = _tip(rows, "B")
    assert bx < cx and by > cy  # -120 deg: lower left
    cxx, cyy = _tip(rows, "C")
    assert cxx < cx and cyy < cy  # +120 deg: upper left
    ix, iy = _tip(rows, "b")
    assert ix > cx and iy < cy  # +60 deg: upper right


def test_reversed_ct_moves_the_current_phasor_by_180_degrees(profile):
    # REFERENCES.md section 2 (wiring-fault signatures [C]): a reversed CT on phase b turns
    # that current by 180 degrees; the others stay. The diagram's table shows it directly.
    good = _snap(profile).meters["M2"]
    bad = _snap(profile, faults=["ct-reversed:M2:B"]).meters["M2"]
    shift = (bad.get("i_ang.B") - good.get("i_ang.B")) % 360.0
    assert shift == pytest.approx(180.0, abs=1.0)
    assert bad.get("i_ang.A") == pytest.approx(good.get("i_ang.A"), abs=0.5)
    assert f"{bad.get('i_ang.B'):7.1f}" in phasor_text(profile, "M2", bad).plain


def test_map_without_angles_says_so(profile):
    text = phasor_text(profile, "M3", _snap(profile).meters["M3"]).plain
    assert "no angle registers" in text and "corvid-i32" in text


# ---------------------------------------------------------------- checks and trend


def test_failures_first_with_their_cause():
    results = [
        CheckResult("meter.p_sum", "M1", Status.PASS),
        CheckResult("phase.sequence", "M2", Status.FAIL, message="CT of phase B looks reversed."),
        CheckResult("meter.pf", "M3", Status.WARN, message="PF near the band edge."),
    ]
    text = checks_text(results, "inconsistent").plain
    assert text.index("FAIL") < text.index("WARN")
    assert "CT of phase B looks reversed." in text
    assert "INCONSISTENT" in text and "\u2718" in text  # word and symbol, not colour alone
    assert "provisional" not in text
    settling = checks_text(results, "settling").plain.splitlines()
    # said before the first failure line: nothing is judged while the readings settle
    assert "nothing is judged until they are steady" in settling[1]


def test_meters_the_model_could_not_verify_are_listed_even_when_every_check_passes():
    """Unverified is never a pass: the checks view names each such meter and why."""
    results = [
        CheckResult("meter.p_sum", "M1", Status.PASS),
        CheckResult(
            "network.model_fit",
            "bench",
            Status.PASS,
            message="readings fit the network model: chi-square 12.5 for 30 degrees of freedom",
        ),
        CheckResult(
            "network.model_fit",
            "M1",
            Status.NA,
            message="unverified: M1 VT ratio: no other reading predicts it",
            cause="unverified",
        ),
        CheckResult("network.model_fit", "M2", Status.PASS, message="M2 agrees"),
    ]
    text = checks_text(results, "consistent").plain
    assert "all 3 applicable checks pass" in text
    assert "model: readings fit the network model: chi-square 12.5" in text
    assert "? 1 meter(s) unverified against the network model:" in text
    assert "? M1: M1 VT ratio: no other reading predicts it" in text
    assert "M2:" not in text.split("unverified against")[1]
    plain = checks_text(results[:1], "consistent").plain
    assert "unverified" not in plain and "model:" not in plain


def test_trend_spread_is_the_settle_figure():
    # SettleCriterion (meas/model.py): rel_spread = (max - min) / |mean| over the window.
    assert window_spread([99.0, 100.0, 101.0]) == pytest.approx(0.02)
    rows = trend_rows([0.0, 1.0, 2.0, 3.0], 2)
    assert rows[1][0] == "\u2581" and rows[0][3] == "\u2588"  # lowest and highest bar


def test_step_detail_tells_a_wrong_status_from_an_unread_one_and_from_one_taken_on_word():
    step = StepInfo(
        index=2,
        total=5,
        step_id="s",
        title="t",
        instruction="Close the tie.",
        kind="manual",
        state="waiting",
        expected={"CB1": "closed", "TIE": "closed", "RX": "open", "LB2": "closed"},
        actual={"CB1": "closed", "TIE": "open", "RX": "unknown", "LB2": "unknown"},
        flagged=("TIE", "RX"),  # the runner: LB2 has no status point, so it is not flagged
    )
    lines = step_detail(step).plain.splitlines()
    assert "\u2714 as expected: CB1 closed" in lines
    assert "\u2718 MISMATCH TIE: expected closed, reads open" in lines
    unread = next(line for line in lines if line.startswith("? STATUS NOT READ"))
    assert "RX (expected open)" in unread and "PLC" in unread and "TIE" not in unread
    on_word = next(line for line in lines if "on your word" in line)
    assert "LB2 closed" in on_word
    assert not any("MISMATCH RX" in line or "MISMATCH LB2" in line for line in lines)


def test_step_detail_shows_the_switch_still_to_operate_as_a_task_not_a_mismatch():
    common = dict(
        index=3,
        total=5,
        step_id="s",
        title="t",
        instruction="Close SW2.",
        kind="remote",
        expected={"SW2": "closed", "TIE": "open"},
        actual={"SW2": "open", "TIE": "closed"},
        flagged=("SW2", "TIE"),
        to_operate=("SW2",),
    )
    lines = step_detail(StepInfo(state="waiting", **common)).plain.splitlines()
    assert "\u2192 TO OPERATE SW2: reads open, this step sets it closed" in lines
    assert "\u2718 MISMATCH TIE: expected open, reads closed" in lines  # not this step's to operate
    after = step_detail(StepInfo(state="verifying", **common)).plain.splitlines()
    assert (
        "\u2718 MISMATCH SW2: expected closed, reads open" in after
    )  # once operated, a difference is wrong


def test_undetectable_errors_of_one_reason_stay_on_one_line():
    """A meter's undetectable offsets (one per reading) are named while few, counted when many."""
    assert _short(["reversed CT A", "reversed CT B", "reversed CT C"]) == "reversed CT A/B/C"
    assert _short(["VT ratio", "offset of v_ln.A"]) == "VT ratio, offset of v_ln.A"
    assert _short(["offset of i.A", "offset of i.B"]) == "offsets of i.A/i.B"
    many = [f"offset of {k}" for k in ("v_ln.A", "v_ln.B", "v_ln.C", "i.A", "i.B", "p.T")]
    assert _short(["CT ratio", *many]) == "CT ratio, offsets of 6 readings"


def test_every_letter_key_works_with_caps_lock_unless_its_capital_is_a_key_of_its_own():
    """A terminal sends Shift+M or a Caps Lock letter as the capital character (textual's key
    "M"), so the capitals are bound: to the same action, or for M to the previous meter."""
    bound = {b.key: b.action for b in bindings()}
    assert bound["M"] == "prev_meter" and bound["m"] == "next_meter"
    assert "shift+m" not in bound  # never sent by a terminal for a letter
    for k in KEYS:
        if len(k.key) == 1 and k.key.islower() and k.key != "m":
            assert bound[k.key.upper()] == k.action, k.key


def test_the_safety_and_coverage_screens_take_their_letters_in_capitals_too():
    for screen in (SafetyScreen, CoverageScreen):
        keys = {b.key: b.action for b in screen.BINDINGS if isinstance(b, Binding)}
        for key, action in list(keys.items()):
            if len(key) == 1 and key.islower():
                assert keys.get(key.upper()) == action, (screen.__name__, key)
