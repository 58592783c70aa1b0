"""Plain-language names of the checks for a client's report (the id goes beside, in small print).

The ids are ``meas.checks.CHECK_IDS``; docs/checks.md says what each compares. An id not named
here (a check added later) shows as itself.
"""

from __future__ import annotations

CHECK_NAMES: dict[str, str] = {
    "meter.p_sum": "Meter active power: total equals the sum of the phases",
    "meter.q_sum": "Meter reactive power: total equals the sum of the phases",
    "meter.s_total": "Meter apparent power agrees with its P and Q",
    "meter.pf": "Meter power factor agrees with its P and S",
    "meter.s_phase": "Meter apparent power per phase agrees with V times I",
    "meter.frequency": "Frequency within the bench's band",
    "phase.v_sequence": "Voltage phase sequence is A-B-C",
    "phase.v_unbalance": "Voltage unbalance within limit",
    "phase.i_unbalance": "Current unbalance within limit",
    "phase.pf_spread": "Power factor similar on the three phases",
    "phase.wiring": "CT and VT wiring (polarity and phase order)",
    "network.p_balance": "Active power balance at the bus",
    "network.q_balance": "Reactive power balance at the bus",
    "network.losses": "Losses along the branch as the model expects",
    "network.v_agree": "Meters on one bus agree on its voltage",
    "network.f_agree": "Meters agree on the frequency",
    "network.open_switch": "No current through an open switch",
    "network.energization": "Buses live or dead as the switches say",
    "network.bad_data": "Most likely wrong measurement in the network",
    "quality.comm": "Meter answers its polls",
    "quality.v_range": "Voltage within the meter's range",
    "quality.i_range": "Current within the meter's range",
    "quality.frozen": "Meter values are updating (not frozen)",
    "quality.noise": "Readings steady (noise within limit)",
}


def check_name(check_id: str) -> str:
    return CHECK_NAMES.get(check_id, check_id)
