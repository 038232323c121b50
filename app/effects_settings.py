"""The *Effects in depth* page's choices as recipe settings, and back.

The page keeps its choices under the ``effects_`` session keys below; while a part's "In the
report and recipe" switch is on, its choices become settings: ``cox.splines`` (one entry per
chosen covariate, all with the page's number of knots), ``cox.split`` (times and the covariates
whose effect may change) and the ``subgroups`` analysis (its switch is ``INCLUDE_KEYS`` in
``app.share_section``).
"""

from __future__ import annotations

from collections.abc import MutableMapping

SPLINE_INCLUDE = "effects_spline_include"
SPLINE_VARIABLES = "effects_spline_variables"
SPLINE_KNOTS = "effects_spline_knots"
SPLIT_INCLUDE = "effects_split_include"
SPLIT_TIMES = "effects_split_times"
SPLIT_CHANGING = "effects_split_changing"
SUBGROUPS_INCLUDE = "effects_subgroups_include"
SUBGROUP_VARIABLES = "effects_subgroups_variables"
SUBGROUP_GROUPS = "effects_subgroups_groups"
KNOT_CHOICES = (3, 4, 5, 6, 7)
GROUP_CHOICES = (2, 3, 4, 5)


def times_from_text(text) -> list[float]:
    """Positive numbers from '6, 12; 24' (anything else is left out)."""
    parts = str(text or "").replace(";", ",").split(",")
    times = []
    for part in parts:
        try:
            value = float(part.strip())
        except ValueError:
            continue
        if value > 0:
            times.append(value)
    return sorted(set(times))


def spline_settings(session: MutableMapping) -> list[dict]:
    knots = int(session.get(SPLINE_KNOTS) or 4)
    return [{"variable": str(v), "knots": knots} for v in session.get(SPLINE_VARIABLES) or ()]


def split_settings(session: MutableMapping) -> dict | None:
    times = times_from_text(session.get(SPLIT_TIMES))
    if not times:
        return None
    return {"times": times, "changing": [str(v) for v in session.get(SPLIT_CHANGING) or ()]}


def effects_choices(session: MutableMapping, settings: dict) -> None:
    """Put the page's switched-on choices into ``settings`` (recipe layout)."""
    cox = settings.get("cox")
    if cox is not None:
        if session.get(SPLINE_INCLUDE):
            cox["splines"] = spline_settings(session)
        if session.get(SPLIT_INCLUDE):
            cox["split"] = split_settings(session)
    if "subgroups" in settings:
        variables = [str(v) for v in session.get(SUBGROUP_VARIABLES) or ()]
        if not variables:
            del settings["subgroups"]  # nothing chosen yet: nothing to report
        else:
            settings["subgroups"] = {
                "variables": variables,
                "groups": int(session.get(SUBGROUP_GROUPS) or GROUP_CHOICES[0]),
            }


def restore_effects(session: MutableMapping, settings: dict) -> None:
    """The inverse of ``effects_choices``: the page shows a recipe's splines, split and
    subgroups with their switches on."""
    cox = settings.get("cox") or {}
    splines = cox.get("splines") or []
    session[SPLINE_INCLUDE] = bool(splines)
    if splines:
        session[SPLINE_VARIABLES] = [str(s["variable"]) for s in splines]
        knots = int(splines[0].get("knots") or 4)
        session[SPLINE_KNOTS] = knots if knots in KNOT_CHOICES else 4
    split = cox.get("split")
    session[SPLIT_INCLUDE] = bool(split)
    if split:
        session[SPLIT_TIMES] = ", ".join(f"{t:g}" for t in split.get("times") or ())
        session[SPLIT_CHANGING] = [str(v) for v in split.get("changing") or ()]
    subgroups = settings.get("subgroups")
    if subgroups:
        session[SUBGROUP_VARIABLES] = [str(v) for v in subgroups.get("variables") or ()]
        groups = int(subgroups.get("groups") or 2)
        session[SUBGROUP_GROUPS] = groups if groups in GROUP_CHOICES else 2
