"""``benchwalk calibrate DATASET``: fit the profile's network model to a session's readings.

Exit codes: 0 the fit converged and was accepted; 1 it was rejected or did not converge (the
reason names the worst step, meter and quantity); 2 a usage or data error (one line).
"""

from __future__ import annotations

import os

# The fit works on small dense matrices: BLAS threads only oversubscribe a shared machine (they
# made a fit 7x slower here; see benchmarks/bench_solver.py). numpy is not imported yet.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
from pathlib import Path  # noqa: E402

from meas.calib.run import Calibration, Options, calibrate_dataset  # noqa: E402
from meas.calib.write import write_calibration  # noqa: E402
from meas.errors import BenchwalkError  # noqa: E402

from .common import comma_list  # noqa: E402

HELP = "fit the profile's network model (lines, source, loads) to a dataset's captured readings"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("dataset", metavar="DATASET", type=Path, help="dataset folder (from export)")
    p.add_argument(
        "--param",
        action="append",
        default=[],
        metavar="BRANCH.KEY",
        help="parameter to fit, globs allowed (repeatable), e.g. L2.r_ohm or 'L*.x_ohm'; "
        "default: every parameter of the model",
    )
    p.add_argument(
        "--steps",
        default="passing",
        metavar="passing|all|ID,ID",
        help="steps to fit: those whose checks passed (default), all, or a comma list of ids",
    )
    p.add_argument(
        "--emf",
        choices=("shared", "per-step"),
        default="shared",
        help="one source EMF for the session (default) or one per step when the supply drifts",
    )
    p.add_argument(
        "--noise",
        choices=("systematic", "independent"),
        default="systematic",
        help="meter class limits as one fitted gain per meter and quantity (default) or as "
        "independent noise on every reading",
    )
    p.add_argument(
        "--repeatability",
        type=float,
        default=None,
        metavar="REL",
        help="relative spread of one capture (e.g. 0.0005); default: from the captures",
    )
    p.add_argument("--alpha", type=float, default=0.05, help="significance of the chi-squared test")
    p.add_argument(
        "--out", type=Path, default=None, help="folder to write (default: DATASET-calibration)"
    )
    p.add_argument(
        "--overwrite", action="store_true", help="replace an existing calibration folder"
    )


def _steps(text: str) -> str | tuple[str, ...]:
    if text in ("passing", "all"):
        return text
    ids = comma_list(text)
    if not ids:
        raise BenchwalkError("--steps needs passing, all or a comma-separated list of step ids")
    return ids


def summary_lines(c: Calibration) -> list[str]:
    f = c.fit
    out = [
        f"{len(c.obs)} readings over {len(c.obs.steps)} steps, {len(c.problem.unknowns)} unknowns; "
        f"chi2 {f.chi2:.1f} for {f.dof} dof (p = {f.p_value:.3g}); {f.nfev} evaluations, "
        f"{f.solves} load flows, {f.seconds:.2f} s",
        f"{'parameter':<14}{'profile':>12}{'calibrated':>12}{'u':>10}{'post/prior':>11}  verdict",
    ]
    for e in c.parameters:
        out.append(
            f"{e.name:<14}{e.nominal:>12.5g}{e.value:>12.5g}{e.u:>10.2g}{e.ratio:>11.2f}  {e.verdict}"
        )
    d = c.deviations
    out.append(
        f"readings within max(1.5 %, {d.k:g}u): {int(d.pass_before.sum())} before, "
        f"{int(d.pass_after.sum())} after, of {len(d.base)}"
    )
    beyond = [g.name for g in c.gains if abs(g.value) > g.prior_u * 3**0.5]
    if beyond:
        out.append("meter gains beyond their class: " + ", ".join(beyond))
    out += list(c.notes)
    return out


def main(args: argparse.Namespace) -> int:
    if not 0.0 < args.alpha < 1.0:
        raise BenchwalkError("--alpha must be between 0 and 1, e.g. 0.05")
    if args.repeatability is not None and not 0.0 < args.repeatability < 0.5:
        raise BenchwalkError("--repeatability is a relative spread, e.g. 0.0005 for 0.05 %")
    options = Options(
        params=tuple(args.param),
        steps=_steps(args.steps),
        emf_per_step=args.emf == "per-step",
        noise=args.noise,
        repeatability=args.repeatability,
        alpha=args.alpha,
    )
    ds, c = calibrate_dataset(args.dataset, options)
    out = write_calibration(ds, c, args.out, overwrite=args.overwrite)
    for line in summary_lines(c):
        print(line)
    if c.verdict.accepted:
        print(f"accepted; calibrated profile and report written to {out}")
        return 0
    print(f"not accepted: {c.verdict.reason}")
    print(f"report written to {out} (no calibrated profile)")
    return 1
