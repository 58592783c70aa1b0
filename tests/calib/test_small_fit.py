"""A quick fit on the demo bench (invented data): a few parameters, the radial steps, the
noise-free truth known. Checks the core pieces the slow tests exercise at full size: the
estimates, the profile text written back, the identifiability verdicts and the usage errors."""

from __future__ import annotations

import pytest
from support.calib_bench import DEMO, as_built, demo_profile, live_configs, synthesize

from meas.calib.identify import verdict
from meas.calib.profile_text import calibrated_text
from meas.calib.run import Options, calibrate
from meas.calib.selection import select_parameters
from meas.errors import BenchwalkError
from meas.profile.files import load_profile

STEPS = ("pick-up-section-2", "load-bank-2", "reactor-in")


@pytest.fixture(scope="module")
def small():
    profile = demo_profile()
    true = as_built(profile, {"L2.r_ohm": 0.85, "L2.x_ohm": 1.1})
    configs = [c for c in live_configs(profile) if c.id in STEPS]
    obs, _ = synthesize(profile, true, configs, seed=5, gain_of_class=0.0, repeatability=1e-4)
    return profile, calibrate(profile, obs, Options(params=("L2.?_ohm", "LD1.*")))


def test_small_fit_recovers_the_changed_line(small):
    _, c = small
    est = {e.name: e for e in c.parameters}
    assert set(est) == {"L2.r_ohm", "L2.x_ohm", "LD1.p_w", "LD1.q_var"}
    assert est["L2.r_ohm"].value == pytest.approx(0.12 * 0.85, rel=0.03)  # the truth, invented
    assert est["L2.x_ohm"].value == pytest.approx(0.15 * 1.1, rel=0.03)
    assert est["L2.r_ohm"].low95 <= 0.102 <= est["L2.r_ohm"].high95
    assert c.verdict.accepted, c.verdict.reason
    d = c.deviations
    assert d.pass_after.all()
    assert abs(d.dev_after).max() < abs(d.dev_before).max() / 2


def test_calibrated_text_replaces_values_keeps_the_rest_and_loads(small, tmp_path):
    profile, c = small
    text = DEMO.read_text()
    out = calibrated_text(text, profile, c.parameters, "S1", "2026-12-02")
    assert out.count("# calibrated from dataset S1 on 2026-12-02:") == 2  # L2 and LD1 lines
    assert len(out.splitlines()) == len(text.splitlines()) + 2
    (tmp_path / "feeder_bench.toml").write_text(out)
    (tmp_path / "feeder_bench.sequence.toml").write_text(
        DEMO.with_name("feeder_bench.sequence.toml").read_text()
    )
    loaded = load_profile(tmp_path / "feeder_bench.toml")
    est = {e.name: e.value for e in c.parameters}
    l2 = loaded.branch("L2").model
    assert l2.r_ohm == pytest.approx(est["L2.r_ohm"], rel=1e-5)  # type: ignore[union-attr]
    assert loaded.branch("L3").model == profile.branch("L3").model  # untouched


def test_per_phase_values_keep_their_split(small):
    profile, c = small
    ld2 = [e for e in c.parameters if e.name == "LD1.p_w"][0]
    fake = type(ld2)(**{**ld2.__dict__, "name": "LD2.p_w", "value": 5500.0, "nominal": 5000.0})
    out = calibrated_text(DEMO.read_text(), profile, [fake], "S1", "2026-12-02")
    assert "p_w = [2750.0, 1650.0, 1100.0]" in out  # 2500/1500/1000 scaled by 1.1


def test_verdict_thresholds():
    """Our thresholds (CALIBRATION_NOTES.md §1.4): < 0.5 measured, 0.5-0.9 partly, else prior."""
    assert [verdict(r) for r in (0.1, 0.49, 0.5, 0.89, 0.9, 1.0)] == [
        "measured",
        "measured",
        "partly",
        "partly",
        "prior only",
        "prior only",
    ]


@pytest.mark.parametrize(
    ("patterns", "words"),
    [
        (("X1.r_ohm",), "is not a parameter"),
        (("T*.uk_pct",), "glob matches no parameter"),
        (("SH1.p_w",), "profile value is 0"),
    ],
)
def test_parameter_selection_errors_name_the_pattern(patterns, words):
    with pytest.raises(BenchwalkError, match=words):
        select_parameters(demo_profile(), patterns)


def test_default_selection_is_every_parameter_but_zero_valued_ones():
    names = [p.name for p in select_parameters(demo_profile())]
    assert len(names) == 22 and "SH1.p_w" not in names and "SH1.q_var" in names
