"""One calibration from start to verdict: choose, fit, judge. No files (``write`` does those)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

from ..dataset.read import Dataset, load_dataset
from ..errors import BenchwalkError
from ..model import Profile
from ..network.parameters import ModelParameter, model_parameters
from .accept import Deviations, Verdict, deviations, judge
from .fit import FitResult, run_fit
from .identify import Direction, Estimate, correlated_pairs, directions, estimates
from .observations import Observations
from .predict import NetworkPredictor, Predictor
from .problem import Problem
from .select import dataset_observations
from .selection import fittable, select_parameters

Noise = Literal["systematic", "independent"]


@dataclass(frozen=True)
class Options:
    params: tuple[str, ...] = ()  # BRANCH.key names or globs; empty = every fittable parameter
    steps: str | tuple[str, ...] = "passing"  # "passing", "all" or step ids
    emf_per_step: bool = False
    noise: Noise = "systematic"
    repeatability: float | None = None  # relative, per capture; None = from the captures
    alpha: float = 0.05  # significance of the χ² test
    method: str = "trf"
    tol: float = 1e-8  # ftol, xtol and gtol of least_squares


@dataclass(frozen=True)
class Calibration:
    profile: Profile
    options: Options
    params: tuple[ModelParameter, ...]
    fixed: tuple[str, ...]  # parameters left at the profile value, and why
    obs: Observations
    problem: Problem
    fit: FitResult
    estimates: tuple[Estimate, ...]
    directions: tuple[Direction, ...]
    correlations: tuple[tuple[str, str, float], ...]
    deviations: Deviations
    verdict: Verdict
    notes: tuple[str, ...] = field(default=())

    @property
    def parameters(self) -> tuple[Estimate, ...]:
        return tuple(e for e in self.estimates if e.kind == "parameter")

    @property
    def gains(self) -> tuple[Estimate, ...]:
        return tuple(e for e in self.estimates if e.kind == "gain")

    @property
    def emfs(self) -> tuple[Estimate, ...]:
        return tuple(e for e in self.estimates if e.kind == "emf")


def _notes(
    profile: Profile, problem: Problem, params: Sequence[ModelParameter], fixed: Sequence[str]
) -> list[str]:
    out = []
    if problem.emf_per_step:
        out.append(
            "The source EMF is fitted per step: a step-to-step voltage change no longer tells the "
            "EMF from the drop across the source impedance (sc_va, x_r), which then rests on its "
            "prior and on what a balanced EMF cannot explain (the drop of unbalanced currents); "
            "see its post/prior ratio."
        )
    if (problem.gain_of_row >= 0).any():
        out.append(
            "Meter gains are fitted per meter and quantity; a load meter's gain and that load's "
            "power cannot be told apart, so their split follows the priors."
        )
    for name in fixed:
        out.append(f"{name} stays at its profile value (0 cannot be scaled).")
    held = len(model_parameters(profile.branches)) - len(params) - len(fixed)
    if held > 0:
        out.append(
            f"{held} parameters not selected are held at their profile values; if one is wrong, "
            "the fitted ones absorb its error (select it too: it keeps its prior)."
        )
    return out


def calibrate(
    profile: Profile,
    obs: Observations,
    options: Options = Options(),
    predictor: Predictor | None = None,
) -> Calibration:
    params = tuple(select_parameters(profile, options.params))
    fixed = tuple(
        p.name for p in model_parameters(profile.branches) if not fittable(p) and not options.params
    )
    pred = predictor if predictor is not None else NetworkPredictor(profile, obs)
    problem = Problem(
        profile,
        obs,
        pred,
        params,
        emf_per_step=options.emf_per_step,
        gains=options.noise == "systematic",
    )
    fit = run_fit(problem, method=options.method, tol=options.tol)
    ests = tuple(estimates(problem.unknowns, fit.z, fit.cov))
    m = len(obs)
    dirs = tuple(directions(problem.unknowns, fit.jac[:m], only=problem.n_model))
    corr = tuple(correlated_pairs(problem.unknowns, fit.cov))
    dev = deviations(profile, problem, fit)
    verdict = judge(problem, fit, dev, options.alpha)
    return Calibration(
        profile=profile,
        options=options,
        params=params,
        fixed=fixed,
        obs=obs,
        problem=problem,
        fit=fit,
        estimates=ests,
        directions=dirs,
        correlations=corr,
        deviations=dev,
        verdict=verdict,
        notes=tuple(_notes(profile, problem, params, fixed)),
    )


def calibrate_dataset(path: Path, options: Options = Options()) -> tuple[Dataset, Calibration]:
    """Read and verify the dataset, take its profile copy and fit it to its captures."""
    ds = load_dataset(Path(path), tables=["measurements", "steps", "switch_states", "meters"])
    profile = ds.load_profile()
    bare = [b.id for b in profile.branches if b.model is None]
    if bare:
        raise BenchwalkError(
            f"{ds.profile_path}: branch {bare[0]!r}"
            f"{f' and {len(bare) - 1} more' if len(bare) > 1 else ''} has no model table, so "
            "there is no network model to calibrate; give the nameplate data in each branch's "
            "model table"
        )
    select_parameters(profile, options.params)  # usage errors before any reading is read
    obs = dataset_observations(
        ds, profile, steps=options.steps, repeatability=options.repeatability
    )
    return ds, calibrate(profile, obs, options)
