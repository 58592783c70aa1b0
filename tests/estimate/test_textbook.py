"""The estimator's engine on textbook positive-sequence networks (one node per bus).

Check values: /work/shared/CALIBRATION_NOTES.md §6.1 (Abur & Expósito, Power System State
Estimation, 2004, ch. 2 3-bus example, as reproduced by pandapower's estimation tests and a
numpy Gauss-Newton [C]) and §6.2 (pandapower ``test_3bus_with_bad_data`` [C]).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2

from meas.estimate.core import MeterTerm, StepModel, TwoPortTerm
from meas.estimate.diagnose import normalized_residuals
from meas.estimate.solver import omega_diag, solve

P_SLOT, Q_SLOT, V_SLOT = 2, 3, 0


def _line(z: complex) -> np.ndarray:
    y = 1 / z
    return np.array([[y, -y], [-y, y]])


def _network(lines: list[tuple[int, int, complex]]) -> tuple[TwoPortTerm, ...]:
    return tuple(
        TwoPortTerm(f"L{a}{b}", np.array([a, b]), (lambda pv, z=z: _line(z)), ())
        for a, b, z in lines
    )


def _meter(name: str, bus: int, cur, slots, z, s) -> MeterTerm:
    return MeterTerm(
        name, np.array([bus]), cur, -1, -1, np.array(slots), np.array(z, float), np.array(s, float)
    )


def _step(tps, meters) -> StepModel:
    return StepModel(3, np.ones(3), np.ones(3, complex), np.array([0]), tps, (), meters, (), 1)


def _state(fit) -> np.ndarray:
    return fit.lay.tcs[0] @ fit.x[fit.lay.offsets[0] :]


ABUR = _network([(0, 1, 0.01 + 0.03j), (0, 2, 0.02 + 0.05j), (1, 2, 0.03 + 0.08j)])
# bus-2 injection = sum of the currents into the lines at bus 2 (ends: L01 to-end, L12 from-end)
ABUR_METERS = (
    _meter("V1", 0, (), [V_SLOT], [1.006], [0.004]),
    _meter("V2", 1, (), [V_SLOT], [0.968], [0.004]),
    _meter("inj2", 1, (("t", 0, 1, 1.0), ("t", 2, 0, 1.0)), [P_SLOT, Q_SLOT], [-0.501, -0.286], [0.01, 0.01]),
    _meter("F12", 0, (("t", 0, 0, 1.0),), [P_SLOT, Q_SLOT], [0.888, 0.568], [0.008, 0.008]),
    _meter("F13", 0, (("t", 1, 0, 1.0),), [P_SLOT, Q_SLOT], [1.173, 0.663], [0.008, 0.008]),
)  # fmt: skip


def test_abur_exposito_3bus_state_objective_and_residuals() -> None:
    fit = solve([_step(ABUR, ABUR_METERS)], [])
    assert fit.converged
    v = _state(fit)
    # CALIBRATION_NOTES §6.1 (Abur & Expósito 2004, ch. 2): V and θ
    np.testing.assert_allclose(np.abs(v), [0.999629, 0.974156, 0.943890], atol=1e-5)
    np.testing.assert_allclose(np.degrees(np.angle(v)), [0.0, -1.247547, -2.745717], atol=1e-5)
    # §6.1: J = 8.638193 with dof 3; χ²_0.95(3) = 7.8147, so the test rejects at 5 %
    assert fit.cost == pytest.approx(8.638193, abs=1e-5)
    dof = len(fit.evals[0].r) - (fit.lay.n - fit.lay.ns)
    assert dof == 3
    assert chi2.ppf(0.95, dof) == pytest.approx(7.8147, abs=1e-4)
    assert fit.cost > chi2.ppf(0.95, dof)
    # §6.1: normalized residuals V1 2.226, V2 2.205, P2 0.777, Q2 1.810, P12 0.900, Q12 1.660,
    # P13 0.777, Q13 1.810 (row order here: V1, V2, P2, Q2, P12, Q12, P13, Q13)
    rn = normalized_residuals(fit)[0]
    np.testing.assert_allclose(
        rn, [2.226, 2.205, 0.777, 1.810, 0.900, 1.660, 0.777, 1.810], atol=1e-3
    )
    assert np.nanmax(rn) < 3.0  # §6.1: the LNR test removes nothing


def test_abur_exposito_3bus_uncertainty_of_the_state() -> None:
    fit = solve([_step(ABUR, ABUR_METERS)], [])
    cov = fit.ginv  # in the rectangular state; map to polar by the Jacobian of (|V|, θ)
    v = _state(fit)
    tc = fit.lay.tcs[0]
    # d|V|/dx and dθ/dx rows from v = Tc x
    dm = (np.conj(v)[:, None] * tc).real / np.abs(v)[:, None]
    da = (tc / v[:, None]).imag
    sv = np.sqrt(np.einsum("ij,jk,ik->i", dm, cov, dm))
    sa = np.sqrt(np.einsum("ij,jk,ik->i", da, cov, da))
    # §6.1: σ(V1, V2, V3) = 0.002794, 0.002865, 0.002966; σ(θ2, θ3) = 0.000224, 0.000518 rad
    np.testing.assert_allclose(sv, [0.002794, 0.002865, 0.002966], atol=2e-6)
    np.testing.assert_allclose(sa[1:], [0.000224, 0.000518], atol=2e-6)


BAD = _network([(0, 1, 0.7 + 0.2j), (0, 2, 0.8 + 0.8j), (1, 2, 1 + 0.6j)])
# pandapower's bus readings are consumption (p -0.018, q 0.1): the injection is the negative
BAD_METERS = (
    _meter("V1", 0, (), [V_SLOT], [1.08], [0.05]),
    _meter("V3", 2, (), [V_SLOT], [1.015], [0.05]),
    _meter("inj3", 2, (("t", 1, 1, 1.0), ("t", 2, 1, 1.0)), [P_SLOT, Q_SLOT], [0.018, -0.1], [0.01, 0.01]),
    _meter("F12", 0, (("t", 0, 0, 1.0),), [P_SLOT, Q_SLOT], [-0.0011, 0.024], [0.01, 0.01]),
)  # fmt: skip
BAD_STATE_V = [1.062707, 1.058877, 1.031738]  # §6.2
BAD_STATE_DEG = [0.0, 0.867658, 3.138050]  # §6.2


def _chi2_flags(fit) -> bool:
    dof = len(fit.evals[0].r) - (fit.lay.n - fit.lay.ns)
    return fit.cost > chi2.ppf(0.95, dof)  # pandapower chi2_analysis: chi2_prob_false = 0.05


def test_bad_data_network_clean() -> None:
    fit = solve([_step(BAD, BAD_METERS)], [])
    v = _state(fit)
    np.testing.assert_allclose(np.abs(v), BAD_STATE_V, atol=1e-5)
    np.testing.assert_allclose(np.degrees(np.angle(v)), BAD_STATE_DEG, atol=1e-5)
    assert not _chi2_flags(fit)  # §6.2: chi2_analysis returns False


def test_bad_data_network_flags_and_removes_exactly_the_bad_voltage() -> None:
    bad = (*BAD_METERS, _meter("V2", 1, (), [V_SLOT], [1.3], [0.01]))  # §6.2: V2 = 1.3, σ 0.01
    step = _step(BAD, bad)
    fit = solve([step], [])
    assert _chi2_flags(fit)  # §6.2: chi2_analysis returns True
    rn = normalized_residuals(fit)[0]
    rows = [(m.name, k) for m in step.meters for k in range(len(m.slots))]
    worst = rows[int(np.nanargmax(rn))]
    assert worst == ("V2", 0)
    assert np.nanmax(rn) > 3.0  # pandapower remove_bad_data threshold rn_max 3
    cleaned = solve([_step(BAD, tuple(m for m in bad if m.name != worst[0]))], [])
    v = _state(cleaned)
    np.testing.assert_allclose(np.abs(v), BAD_STATE_V, atol=1e-5)  # §6.2: the same state again
    np.testing.assert_allclose(np.degrees(np.angle(v)), BAD_STATE_DEG, atol=1e-5)
    assert not _chi2_flags(cleaned)


def test_omega_marks_critical_rows() -> None:
    """A reading with no redundancy (the only one on its bus) has Ω̃_ii = 0 (Abur & Expósito ch. 5)."""
    meters = (
        _meter("V1", 0, (), [V_SLOT], [1.0], [0.01]),
        _meter("F12", 0, (("t", 0, 0, 1.0),), [P_SLOT, Q_SLOT], [0.1, 0.05], [0.01, 0.01]),
        _meter("F13", 0, (("t", 1, 0, 1.0),), [P_SLOT, Q_SLOT], [0.1, 0.05], [0.01, 0.01]),
    )
    tps = _network([(0, 1, 0.01 + 0.03j), (0, 2, 0.02 + 0.05j)])
    fit = solve([_step(tps, meters)], [])
    om, _ = omega_diag(fit)
    assert np.all(np.abs(om[0]) < 1e-9)  # 5 readings, 5 unknowns: every reading is critical
