"""One session's wiring: poller, checks, journal and runner (and a simulated bench for demos).

Modules: ``running`` (``Session``: new, resume, views, export, close), ``start`` (what a
session needs before it runs: the journal, the simulated bench, the checks on the options,
where a resume starts),
``settle`` (the settle detector as the runner sees it), ``bench_clock`` (the simulated
bench advanced by the poll cycles).

Headless mode and the console both use it: ``async for view in session.views(): ...`` runs
the poll loop, feeds every snapshot to the runner (which journals it with its role) and
yields the runner's picture after each one; the caller reacts by calling runner commands.

What is journalled: every snapshot polled while a step operates, verifies, settles or
captures (roles ``settling`` / ``capture``, and ``live`` for the polls between two capture
picks); while waiting for the technician or reviewing, one ``live`` snapshot per
``live_every_s`` (default 1 s), so a long wait does not bloat the journal.

A demo session records in the journal meta that it ran on the simulated bench, with its
seed and faults, so ``resume`` can start the same bench again and bring its switches to
the configuration the sequence had reached. A bench run as built (``as_built_seed``,
``model_errors``: its true network off the nameplate, ``meas.sim.as_built``) also records the
seed and every applied value under ``as_built``; the profile keeps the nameplate model.

The simulated bench runs on simulated time (``meas.sim.clock.CycleClock``): every poll cycle
first advances it by one poll interval and writes the bench's registers for that instant, and
the snapshot carries that time as ``t_mono``, so the runner settles and captures by cycles.
``views()`` on the simulated bench runs the cycles in lockstep with its caller (the simulated
technician acts between two cycles, a remote command's verification runs whole cycles), so
two headless demos with the same seed journal the same values (docs/dataset-format.md).
"""

from __future__ import annotations

from .bench_clock import BenchDriver, bench_driver
from .running import Session
from .settle import SettleAdapter, settle_factory
from .start import (
    SIM_OPERATOR,
    as_built_line,
    bench_start_state,
    create_journal,
    prior_outcomes,
    session_state,
    validate_start,
)

__all__ = [
    "SIM_OPERATOR",
    "BenchDriver",
    "Session",
    "SettleAdapter",
    "as_built_line",
    "bench_driver",
    "bench_start_state",
    "create_journal",
    "prior_outcomes",
    "session_state",
    "settle_factory",
    "validate_start",
]
