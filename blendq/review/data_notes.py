"""Notes on how a project's data and limits shape the operating window, read from the inputs
alone (no fit): a user's own limit that the operating margin lowers, and a window resting on
fewer sampled steps than ``settings.min_window_steps``. ``check``, ``window``, the report and
summary.json print them; kept here so ``check`` does not load the fitting code.
"""

from __future__ import annotations

from blendq.chemistry.analytes import get_analyte
from blendq.chemistry.limits import limit_set
from blendq.inputs.project import Project


def thin_data_note(project: Project) -> str | None:
    """The thin-data warning without its prefix, or None: the window rests on fewer steps
    with lab results than ``settings.min_window_steps`` (common practice: 3)."""
    s = project.settings
    sampled = project.samples["step"].nunique() if len(project.samples) else 0
    if not 0 < sampled < s.min_window_steps:
        return None
    return (f"the window rests on {sampled} step{'' if sampled == 1 else 's'} with lab results "
            f"(fewer than settings.min_window_steps = {s.min_window_steps}, common practice); "
            "quality between and beyond so few rates is a model's guess, so treat the window "
            "as provisional and add steps")


def data_notes(project: Project) -> list[str]:
    """Lines about how the project's data and limits shape the window (``check``, ``window``,
    the report and summary.json): a user's own limit that the operating margin lowers, and a
    window resting on fewer sampled steps than ``settings.min_window_steps``."""
    s, lines = project.settings, []
    named = {(lim.analyte, lim.authority, lim.value, lim.unit, lim.basis)
             for name in s.limit_sets for lim in limit_set(name)}
    for lim in project.limits:
        if (lim.analyte, lim.authority, lim.value, lim.unit, lim.basis) in named or s.margin >= 1:
            continue
        unit = lim.unit + (f" as {lim.basis}" if lim.basis else "")
        lines.append(
            f"note: the operating margin (settings.margin = {s.margin:g}) applies to your own "
            f"limit too: {get_analyte(lim.analyte).label()} is held below "
            f"{lim.value * s.margin:.3g} {unit}, {s.margin:.0%} of {lim.label()}; if "
            f"{lim.value:g} {unit} is already the level to operate below, enter the value it was "
            f"derived from ({lim.value:g} / {s.margin:g} = {lim.value / s.margin:.3g} {unit}) "
            "or raise the margin, which applies to every limit")
    thin = thin_data_note(project)
    if thin:
        lines.append("warning: thin data: " + thin)
    return lines
