"""Calibration fit: wall time and evaluations, benchwalk's load flow against pandapower's in the loop.

Run:  /work/venv/bin/python benchmarks/bench_calibrate.py [--rounds N] [--dataset DIR] [--coverage N]

Side by side in one run, on the same problem: the demo bench with load bank 2 balanced (pandapower
``runpp`` is positive-sequence), an as-built truth off the profile within tolerance, seeded
readings with meter gains within class (tests/support/calib_bench.py, invented data); five
steps (the reference study's C1-C5), 14 parameters plus meter gains. The same residuals,
priors and least-squares settings, only the model readings differ: ``NetworkPredictor``
(``meas.network``) against ``PandapowerPredictor`` (pandapower 3.5.6 ``runpp``, nets built once
and updated in place). Reported: median wall time of the fit, function and Jacobian
evaluations, load flows, the ratio, and the largest difference of the optimum.

Our fit takes its Jacobian from implicit-function sensitivities of the load flow
(``meas/calib/sensitivity.py``: one load flow per step and Jacobian); pandapower offers none,
so with it in the loop the model columns are forward differences of whole load flows. A third
row times our own load flow with those same forward differences (what ``calibrate`` did
before the sensitivities), so the gain of each part shows side by side.

``--dataset DIR`` also times ``calibrate`` (every parameter, default options) on a real demo
dataset (``benchwalk demo --headless`` then its ``dataset`` folder). ``--coverage N`` runs N
seeds of the full demo problem and prints how often the 95 % intervals of the parameters
called "measured" cover the truth.

Dense small matrices: BLAS threads only oversubscribe a shared machine, so this sets
OPENBLAS_NUM_THREADS=1 unless the environment already does (see bench_solver.py).
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy: see the docstring

import argparse  # noqa: E402
import pathlib  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))  # this checkout's meas/, not an installed copy elsewhere
sys.path.insert(0, str(ROOT / "benchmarks"))
sys.path.insert(0, str(ROOT / "tests"))
from common import Figure, Target, median  # noqa: E402
from support.calib_bench import (  # noqa: E402
    DEMO,
    demo_profile,
    live_configs,
    random_as_built,
    synthesize,
)
from support.calib_pandapower import PandapowerPredictor, balanced_demo  # noqa: E402

from meas.calib.predict import NetworkPredictor  # noqa: E402
from meas.calib.run import Options, calibrate, calibrate_dataset  # noqa: E402
from meas.calib.selection import select_parameters  # noqa: E402
from meas.network.parameters import model_parameters  # noqa: E402
from meas.profile import load_profile  # noqa: E402

STEPS = ("energize-trunk-1", "pick-up-section-2", "load-bank-2", "reactor-in", "close-tie")
PARAMS = (
    "SRC.v_ll", "SRC.sc_va", "L1.r_ohm", "L1.x_ohm", "L2.r_ohm", "L2.x_ohm", "L3.r_ohm",
    "L3.x_ohm", "LD1.p_w", "LD1.q_var", "LD2.p_w", "LD2.q_var", "LD3.p_w", "LD3.q_var",
)  # fmt: skip


def problem(seed: int = 1):
    profile = balanced_demo(load_profile(DEMO))
    configs = [c for c in live_configs(profile) if c.id in STEPS]
    true = random_as_built(profile, np.random.default_rng(seed), PARAMS)
    obs, _ = synthesize(profile, true, configs, seed=seed)
    return profile, obs


class Differences:
    """Our load flow without its sensitivities: the fit falls back to forward differences."""

    def __init__(self, profile, obs):
        self.inner = NetworkPredictor(profile, obs)

    @property
    def solves(self) -> int:
        return self.inner.solves

    def predict(self, values, emf=None, steps=None, base=None):
        return self.inner.predict(values, emf, steps, base)

    def affected(self, name):
        return self.inner.affected(name)


def side_by_side(rounds: int) -> list[Figure]:
    profile, obs = problem()
    options = Options(params=PARAMS, method="lm", tol=1e-12)
    own_t, pp_t, own_cpu, own, ref = [], [], [], None, None
    fd_t, fd_cpu, fd = [], [], None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(rounds):
            t = time.perf_counter()
            own = calibrate(profile, obs, options)
            own_t.append(time.perf_counter() - t)
            own_cpu.append(own.fit.cpu_seconds)
            t = time.perf_counter()
            fd = calibrate(profile, obs, options, predictor=Differences(profile, obs))
            fd_t.append(time.perf_counter() - t)
            fd_cpu.append(fd.fit.cpu_seconds)
        t = time.perf_counter()  # one pandapower run: it takes tens of seconds
        ref = calibrate(profile, obs, options, predictor=PandapowerPredictor(profile, obs))
        pp_t.append(time.perf_counter() - t)
    assert own is not None and ref is not None and fd is not None
    a = np.array([e.value for e in own.parameters])
    b = np.array([e.value for e in ref.parameters])
    diff = float(np.max(np.abs(a - b) / np.abs(b)))
    ours, theirs = median(own_t), median(pp_t)
    print(
        f"same problem, {len(obs)} readings, {len(obs.steps)} steps, {len(own.problem.unknowns)} unknowns:\n"
        f"  benchwalk load flow : {ours:7.3f} s (CPU {median(own_cpu):.3f} s)  nfev {own.fit.nfev:3d}  njev {own.fit.njev:3d}  "
        f"load flows {own.fit.solves:5d}  chi2 {own.fit.chi2:.6f}\n"
        f"  ours, differences   : {median(fd_t):7.3f} s (CPU {median(fd_cpu):.3f} s)  nfev {fd.fit.nfev:3d}  njev {fd.fit.njev:3d}  "
        f"load flows {fd.fit.solves:5d}  chi2 {fd.fit.chi2:.6f}\n"
        f"  pandapower runpp    : {theirs:7.3f} s (CPU {ref.fit.cpu_seconds:.3f} s)  nfev {ref.fit.nfev:3d}  njev {ref.fit.njev:3d}  "
        f"load flows {ref.fit.solves:5d}  chi2 {ref.fit.chi2:.6f}\n"
        f"  pandapower / ours = {theirs / ours:.1f}x (CPU {ref.fit.cpu_seconds / median(own_cpu):.1f}x); "
        f"ours with differences / ours = {median(fd_t) / ours:.1f}x; "
        f"optimum max relative difference {diff:.2e}"
    )
    return [
        Figure(
            "calibrate",
            "fit, balanced demo (5 steps, 14 parameters + gains) vs pandapower runpp in the loop",
            ours,
            "s",
            reference=theirs,
            ratio=ours / theirs,
            targets=(
                Target("ours", "<=", 1.0),
                Target("ratio", "<=", 1 / 20, "pandapower >= 20x slower"),
            ),
            note=f"optimum differs by {diff:.1e} (relative)",
            extra={
                "nfev_ours": own.fit.nfev,
                "nfev_pandapower": ref.fit.nfev,
                "max_rel_diff": diff,
            },
        )
    ]


def on_dataset(path: pathlib.Path, rounds: int) -> list[Figure]:
    fits, cpus, totals, nfev, solves = [], [], [], 0, 0
    for _ in range(rounds):
        t = time.perf_counter()
        _, c = calibrate_dataset(path)
        totals.append(time.perf_counter() - t)
        fits.append(c.fit.seconds)
        cpus.append(c.fit.cpu_seconds)
        nfev, solves = c.fit.nfev, c.fit.solves
    print(
        f"demo dataset {path}: fit {median(fits):.3f} s, CPU {median(cpus):.3f} s (with reading the dataset {median(totals):.3f} s), "
        f"nfev {nfev}, load flows {solves}, {len(c.obs)} readings, {len(c.problem.unknowns)} unknowns, "
        f"accepted {c.verdict.accepted}"
    )
    return [
        Figure(
            "calibrate",
            "fit of every parameter on a headless demo dataset",
            median(fits),
            "s",
            targets=(Target("ours", "<=", 1.0),),
            note=f"CPU {median(cpus):.2f} s",
            extra={"nfev": nfev, "load_flows": solves, "cpu": median(cpus)},
        )
    ]


def coverage(seeds: int) -> float:
    profile = demo_profile()
    names = [p.name for p in select_parameters(profile)]
    configs = live_configs(profile)
    inside = total = 0
    for seed in range(seeds):
        true = random_as_built(profile, np.random.default_rng(1000 + seed), names)
        obs, _ = synthesize(profile, true, configs, seed=1000 + seed)
        c = calibrate(profile, obs)
        truth = {p.name: p.nominal for p in model_parameters(true.branches)}
        for e in c.parameters:
            if e.verdict == "measured":
                total += 1
                inside += e.low95 <= truth[e.name] <= e.high95
    share = inside / total
    print(
        f"coverage over {seeds} seeds: {inside} of {total} measured parameters inside 95 % ({share:.1%})"
    )
    return share


def figures(rounds: int = 3) -> list[Figure]:
    return side_by_side(rounds)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--dataset", type=pathlib.Path, default=None)
    ap.add_argument("--coverage", type=int, default=0)
    args = ap.parse_args(argv)
    figs = side_by_side(args.rounds)
    if args.dataset is not None:
        figs += on_dataset(args.dataset, args.rounds)
    for f in figs:
        print(f"{f.figure}: {f.ours:.3f} {f.unit}; target {f.target_text}; passed {f.passed}")
    if args.coverage:
        coverage(args.coverage)
    return 0


if __name__ == "__main__":
    sys.exit(main())
