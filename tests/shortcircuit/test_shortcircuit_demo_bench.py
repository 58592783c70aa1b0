"""IEC 60909 on benchwalk's model of the demo bench against pandapower ``calc_sc``.

Sources: CALIBRATION_NOTES §4.9 / §6.7 (the POC's "true" model is the demo profile: source
408 V, 600 kVA, X/R 8; L1 0.16 + j0.20, L2 0.12 + j0.15, L3 0.20 + j0.16 ohm) [C; pandapower =
hand formula]; pandapower 3.5.6 ``shortcircuit.calc_sc`` run live on the same network
(``tests/support/pandapower_sc.py``), to 1e-3 kA as the issue asks (it agrees to 1e-12 here).
"""

from __future__ import annotations

import math
import warnings

import pandapower.shortcircuit as pp_sc
import pytest
from support.benches import DEMO
from support.pandapower_sc import demo_bench_net

from meas.errors import BenchwalkError
from meas.profile import load_profile
from meas.shortcircuit.iec60909 import every_bus, short_circuit

PROFILE = load_profile(DEMO)
MESHED = {"TIE": "closed"}


def test_poc_values_at_b2_and_b3() -> None:
    # CALIBRATION_NOTES §6.7: ikss 0.36296, ip 0.63487, ith (Tk 0.2 s) 0.36921 kA; §4.9 B3 row
    b2 = short_circuit(PROFILE, "B2", tk_s=0.2)
    assert (b2.ikss_a / 1e3, b2.ip_a / 1e3, b2.ith_a / 1e3) == pytest.approx(
        (0.36296, 0.63487, 0.36921), abs=5e-6
    )
    assert (b2.zk_ohm.real, b2.zk_ohm.imag, b2.r_x) == pytest.approx(
        (0.31441, 0.62530, 0.503), abs=5e-4
    )
    assert b2.c == 1.10 and b2.kappa_method == "radial" and b2.ib_a == b2.ik_a == b2.ikss_a
    b3 = short_circuit(PROFILE, "B3", tk_s=0.2)
    assert (b3.ikss_a / 1e3, b3.ip_a / 1e3, b3.ith_a / 1e3) == pytest.approx(
        (0.33972, 0.56316, 0.34451), abs=5e-6
    )


def test_meshed_kappa_c() -> None:
    # CALIBRATION_NOTES §4.9: tie closed, B2: I"k 0.39760 kA, ip 0.70098 kA by method C
    s = short_circuit(PROFILE, "B2", switch_states=MESHED, kappa_method="C")
    assert s.meshed and s.kappa_method == "C"
    assert (s.ikss_a / 1e3, s.ip_a / 1e3) == pytest.approx((0.39760, 0.70098), abs=5e-6)


def _calc_sc(states: dict[str, str], scale: str, case: str, fault: str, kappa: str, topology: str):  # type: ignore[no-untyped-def]
    net, idx = demo_bench_net(PROFILE, states, scale, case)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp_sc.calc_sc(
            net,
            fault=fault,
            case=case,
            ip=True,
            ith=True,
            tk_s=0.2,
            kappa_method=kappa,
            topology=topology,
        )
    return net.res_bus_sc, idx


@pytest.mark.parametrize("states", [{}, MESHED], ids=["radial", "meshed"])
@pytest.mark.parametrize("fault", ["3ph", "2ph", "1ph"])
@pytest.mark.parametrize(
    ("scale", "case"), [("bench", "max"), ("network", "max"), ("network", "min")]
)
def test_every_bus_against_calc_sc(
    states: dict[str, str], fault: str, scale: str, case: str
) -> None:
    # method C; and method B against calc_sc's plain "meshed" reading of IEC §8.1.3 a) (its
    # "auto" drops the 1.15 when any path to a source has R/X < 0.3, a reading of its own).
    # The bench min case is not compared: c comes from the network voltage level (33 kV, cmin
    # 1.00), while calc_sc on the 400 V copy would take LV cmin 0.90; the network copy agrees.
    # Method B at bench scale is left out for the same reason: its cap is 2.0 at 33 kV, while
    # the 400 V copy caps at LV's 1.8 (bus B0, R/X 0.125).
    methods = [("C", "auto")] + (
        [("B", "meshed" if states else "radial")] if scale == "network" else []
    )
    for kappa, topology in methods:
        res, idx = _calc_sc(states, scale, case, fault, kappa, topology)
        for bus, i in idx.items():
            s = short_circuit(
                PROFILE,
                bus,
                fault,
                case,
                switch_states=states,
                kappa_method=kappa,
                scale=scale,
                tk_s=0.2,
            )  # type: ignore[arg-type]
            assert s.ikss_a / 1e3 == pytest.approx(res.ikss_ka[i], abs=1e-3), bus
            if fault != "1ph":  # calc_sc 3.5.6 leaves ip empty for 1ph faults
                assert s.ip_a / 1e3 == pytest.approx(res.ip_ka[i], abs=1e-3), bus
            if fault == "3ph":
                assert s.ith_a / 1e3 == pytest.approx(res.ith_ka[i], abs=1e-3), bus
                assert abs(s.zk_ohm) == pytest.approx(
                    math.hypot(res.rk_ohm[i], res.xk_ohm[i]), rel=1e-9
                ), bus


def test_network_scale_is_the_bench_times_the_zone_factors() -> None:
    bench = short_circuit(PROFILE, "B2")
    net = short_circuit(PROFILE, "B2", scale="network")
    ps, vs = 333.3333333, 33000.0 / 400.0  # the demo profile's power_scale and zone voltages
    assert net.un_v == 33000.0
    assert net.ikss_a == pytest.approx(bench.ikss_a * ps / vs, rel=1e-12)
    assert abs(net.zk_ohm) == pytest.approx(abs(bench.zk_ohm) * vs**2 / ps, rel=1e-12)
    assert net.r_x == bench.r_x and net.kappa == bench.kappa


def test_every_bus_and_the_errors() -> None:
    assert [s.bus for s in every_bus(PROFILE)] == ["B0", "B1", "B2", "B3"]
    with pytest.raises(BenchwalkError, match="no bus 'B9'"):
        short_circuit(PROFILE, "B9")
    with pytest.raises(BenchwalkError, match="dead"):
        short_circuit(PROFILE, "B3", switch_states={"SW3": "open"})
    with pytest.raises(BenchwalkError, match="fault must be"):
        short_circuit(PROFILE, "B2", "2phg")  # type: ignore[arg-type]
