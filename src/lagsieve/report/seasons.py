"""The summary's seasonal statement of a by-season response (config ``by_season``): for every
driver, the seasons in which it is found (graded strong or moderate), in the order of the year.
The words ("in spring only", "in all seasons") are the template's (``templates/summary.html``)."""
from __future__ import annotations

from lagsieve.evidence.vocabulary import SUPPORTED
from lagsieve.report.context import Context, row_lead, summary_line


def by_season(ctx: Context, rid: str) -> dict | None:
    """For the response ``rid`` with season responses: the seasons in the year's order, and for
    every driver the seasons where it is found, each with its grade, lead and summary line;
    None for a response without seasons."""
    parts = [r for r in ctx.study.responses if r.get("season_of") == rid]
    if not parts or "season" not in ctx.evidence:
        return None
    seasons = [r["season"] for r in parts]
    ev = ctx.evidence[ctx.evidence["response"].isin([r["id"] for r in parts])]
    drivers = []
    for did in dict.fromkeys(ev["driver"]):
        rows = ev[(ev["driver"] == did) & ev["grade"].isin(SUPPORTED)].to_dict("records")
        rows.sort(key=lambda row: seasons.index(row["season"]))
        drivers.append({"driver": ctx.label(did), "found": [row["season"] for row in rows],
                        "where": [{"season": row["season"], "grade": row["grade"], "summary": summary_line(row),
                                   "lead": row_lead(row)} for row in rows]})
    drivers.sort(key=lambda d: (not d["found"], d["driver"]))
    return {"seasons": seasons, "drivers": drivers}
