"""Phase-consistency checks and the wiring diagnosis on hand-built snapshots.

Signatures from REFERENCES.md section 2 (wiring-fault signatures [C]): a reversed CT turns one
phase power by 180 degrees, a swapped pair turns two by +-120 degrees.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from support.check_inputs import balanced, block, demo, snapshot

from meas import phasors as ph
from meas.checks import CheckEngine
from meas.results import Status


@pytest.fixture(scope="module")
def engine():
    return CheckEngine(demo())


def _get(results, check, subject):
    (r,) = [r for r in results if r.check == check and r.subject == subject]
    return r


def _wiring(engine, meter, v, i):
    return _get(engine.run(snapshot([block(engine.profile, meter, v, i)])), "phase.wiring", meter)


@pytest.mark.parametrize(
    "meter", ["M1", "M3", "M5"]
)  # float map with angles; two integer maps without
@pytest.mark.parametrize("phase", [0, 1, 2])
def test_reversed_ct_is_named_with_its_phase(engine, meter, phase):
    v, i = balanced(230.0, 15.0, 20.0)
    i[phase] *= -1
    r = _wiring(engine, meter, v, i)
    assert r.status is Status.FAIL and r.cause == f"ct_reversed:{'ABC'[phase]}"
    assert f"phase {'ABC'[phase]}" in r.message


@pytest.mark.parametrize("meter", ["M1", "M3", "M5"])
@pytest.mark.parametrize("pair", [(0, 1), (1, 2), (2, 0)])
def test_swapped_current_inputs_are_named_with_the_pair(engine, meter, pair):
    v, i = balanced(230.0, 15.0, 20.0)
    a, b = pair
    i[[a, b]] = i[[b, a]]
    r = _wiring(engine, meter, v, i)
    assert r.status is Status.FAIL
    assert r.cause == "phases_swapped:" + "-".join("ABC"[k] for k in pair)


def test_healthy_unbalanced_load_passes(engine):
    # unequal phase loads with similar power factors (the demo's load bank 2 pattern, invented data)
    v = ph.phasor([230.0] * 3, [0.0, -120.0, 120.0])
    i = ph.phasor([11.0, 6.6, 4.4], [-17.7, -120 - 18.4, 120 - 16.7])
    assert _wiring(engine, "M5", v, i).status is Status.PASS


def test_load_that_delivers_power_means_all_cts_reversed(engine):
    v, i = balanced(230.0, 10.0, 20.0)
    r = _wiring(engine, "M8", v, -i)  # M8 meters a load bank: it cannot deliver power
    assert r.status is Status.FAIL and r.cause == "ct_reversed:ABC"


def test_voltage_current_phase_mismatch_on_a_load(engine):
    v, i = balanced(230.0, 10.0, 20.0)
    r = _wiring(
        engine, "M8", v[[1, 2, 0]], i
    )  # voltage terminals shifted one phase against the CTs
    assert r.status is Status.FAIL and r.cause.startswith("vi_mismatch:")


def test_negative_voltage_sequence(engine):
    v = ph.phasor([230.0] * 3, [0.0, 120.0, -120.0])
    res = engine.run(snapshot([block(engine.profile, "M1", v, v / 23.0)]))
    r = _get(res, "phase.v_sequence", "M1")
    assert r.status is Status.FAIL and r.cause == "v_sequence_negative"


def test_voltage_unbalance_from_magnitudes_only(engine):
    # corvid map has no angles: the IEC 61000-4-30 magnitude formula is used; NEMA MG-1 example
    # 460/467/450 V (scaled to the 400 V zone: both definitions are scale-free) -> u2 2.1465 %,
    # LVUR 1.96 % (REFERENCES.md 1 [C])
    k = 400.0 / 459.0
    v, i = balanced(230.94, 10.0, 20.0)
    blk = block(
        engine.profile, "M3", v, i, **{"v_ll.AB": 460 * k, "v_ll.BC": 467 * k, "v_ll.CA": 450 * k}
    )
    r = _get(engine.run(snapshot([blk])), "phase.v_unbalance", "M3")
    assert r.value == pytest.approx(2.1465, abs=1e-3)
    assert (
        r.status is Status.WARN
    )  # above CheckSettings.unbalance_warn_pct = 2 (IEC 61000-2-2 level 2 % [M])
    assert "LVUR 1.96" in r.message and "magnitudes" in r.message


def test_voltage_unbalance_from_phasors(engine):
    v = ph.phasor([230.0, 230.0, 230.0], [0.0, -120.0, 120.0])
    res = engine.run(snapshot([block(engine.profile, "M1", v, v / 23.0)]))
    r = _get(res, "phase.v_unbalance", "M1")
    assert r.status is Status.PASS and r.value == pytest.approx(0.0, abs=1e-6)


# ---------------------------------------------------------------- relabelling phases

_CYCLIC = [(0, 1, 2), (1, 2, 0), (2, 0, 1)]
_FAULTS = ["", "rev:0", "rev:1", "rev:2", "swap:0:1", "swap:1:2", "swap:2:0"]


def _apply(fault, i):
    i = i.copy()
    if fault.startswith("rev"):
        i[int(fault[4])] *= -1
    elif fault.startswith("swap"):
        a, b = int(fault[5]), int(fault[7])
        i[[a, b]] = i[[b, a]]
    return i


def _rename(cause: str, perm) -> str:
    """Cause after relabelling: new phase j holds old phase perm[j]."""
    new_of_old = {"ABC"[perm[j]]: "ABC"[j] for j in range(3)}
    kind, _, arg = cause.partition(":")
    if kind == "ct_reversed" and arg in new_of_old:
        return f"{kind}:{new_of_old[arg]}"
    if kind == "phases_swapped":
        return f"{kind}:" + "-".join(sorted(new_of_old[p] for p in arg.split("-")))
    return cause


def _norm(cause: str) -> str:
    kind, _, arg = cause.partition(":")
    return f"{kind}:" + "-".join(sorted(arg.split("-"))) if kind == "phases_swapped" else cause


@settings(max_examples=40, deadline=None)
@given(
    perm=st.sampled_from(_CYCLIC),
    fault=st.sampled_from(_FAULTS),
    phi=st.floats(-45.0, 45.0),
    i_mag=st.lists(st.floats(8.0, 20.0), min_size=3, max_size=3),
    meter=st.sampled_from(["M1", "M3", "M8"]),
)
def test_relabelling_phases_changes_only_the_names(engine, perm, fault, phi, i_mag, meter):
    # relabelling A-B-C cyclically keeps the positive sequence (DEVELOPERS.md convention), so every
    # status must stay and every phase named in a cause must follow the relabelling
    v = ph.phasor([230.0] * 3, [0.0, -120.0, 120.0])
    i = _apply(fault, ph.phasor(i_mag, np.array([0.0, -120.0, 120.0]) - phi))
    p = list(perm)
    a = engine.run(snapshot([block(engine.profile, meter, v, i)]))
    b = engine.run(snapshot([block(engine.profile, meter, v[p], i[p])]))
    sa = {(r.check, r.subject): r for r in a}
    sb = {(r.check, r.subject): r for r in b}
    assert sa.keys() == sb.keys()
    for key, ra in sa.items():
        rb = sb[key]
        assert ra.status is rb.status, key
        assert _norm(_rename(ra.cause, p)) == _norm(rb.cause), key
