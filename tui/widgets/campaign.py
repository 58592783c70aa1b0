"""The pre-campaign analysis in a few lines, for the start screen.

The same analysis as ``benchwalk campaign PROFILE`` (``meas.calib.design.plan_campaign``):
which model parameters the sequence will measure, which stay at their prior, and the added
step that would help most; the command prints the full table.
"""

from __future__ import annotations

from rich.text import Text

from meas.calib.design import CampaignPlan, Candidate, proposal

from .palette import DEFAULT, Palette

SHOWN = 4  # parameter names listed per verdict before "and N more"


def _names(names: list[str]) -> str:
    more = len(names) - SHOWN
    return ", ".join(names[:SHOWN]) + (f" and {more} more" if more > 0 else "")


def _step(c: Candidate) -> str:
    """The proposal without its full switch list (the command prints that)."""
    return proposal(c).partition(" (")[0]


def campaign_text(plan: CampaignPlan, pal: Palette = DEFAULT) -> Text:
    out = Text()
    measured = plan.by_verdict("measured")
    partly = plan.by_verdict("partly")
    prior = plan.by_verdict("prior only")
    out.append(f"{len(plan.steps)} capture steps calibrate ")
    out.append(f"{len(measured)} of {len(plan.parameters)} model parameters", style="bold")
    out.append("\n")
    if partly:
        out.append("~ partly measured: ", style=pal.style("warn", bold=True))
        out.append(_names(partly) + "\n")
    if prior:
        out.append("? prior only: ", style=pal.style("warn", bold=True))
        out.append(_names(prior) + "\n")
    for name, c in list(plan.best_for.items())[:2]:
        out.append("+ ", style=pal.style("ok", bold=True))
        out.append(f"to measure {name}, add a step {_step(c)}\n")
    if plan.candidates:
        out.append("+ ", style=pal.style("ok", bold=True))
        out.append(f"most informative added step: {_step(plan.candidates[0])}")
    return out
