"""The sections per-time sums cannot give, computed on a stated random sample of the rows.

A database or DuckDB analysis leaves ``{"not_computed": reason}`` where a section needs the
rows themselves (robust variance, splines, a follow-up split, Fine–Gray, parametric,
landmark, performance, subgroup and baseline analyses). Given a seeded sample of the rows
(``SqlSource.random_sample``), the row-level engine computes those sections on it; every
other section keeps the exact result from all rows, and ``computed_with.sample`` names the
sample's size, seed and the sections taken from it, so nothing silently changes meaning.
"""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

from engine.analysis.run import is_not_computed, run_analysis
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles

COX_PARTS = ("splines", "time_split", "ph_check")


def sections_from_sample(
    sections: Mapping, rows: pd.DataFrame, roles: Roles, settings: Mapping, seed: int
) -> tuple[dict, dict]:
    """``sections`` with what was not computed replaced by the sample's result, and the
    ``computed_with.sample`` record: rows, seed and the sections (``cox.splines`` for a part)
    taken from the sample."""
    prepared = prepare(rows, roles)
    on_sample = run_analysis(prepared, settings, rows)
    out = dict(sections)
    taken = []
    for name, section in sections.items():
        if name in ("data", "computed_with") or name not in on_sample:
            continue
        if is_not_computed(section):
            if not is_not_computed(on_sample[name]):
                out[name] = on_sample[name]
                taken.append(name)
            continue
        if name == "cox" and isinstance(section, dict) and isinstance(on_sample[name], dict):
            cox = dict(section)
            for part in COX_PARTS:
                mine, theirs = section.get(part), on_sample[name].get(part)
                if is_not_computed(mine) and theirs is not None and not is_not_computed(theirs):
                    cox[part] = theirs
                    taken.append(f"cox.{part}")
            out[name] = cox
    record = {"rows": len(rows), "seed": int(seed), "sections": taken}
    return out, record
