"""Digests of the settings each stage reads, so that a rerun redoes only the jobs whose
settings changed (Snakemake reruns a job whose ``params`` changed: its ``params`` rerun
trigger). The study config file itself is an input of the report job only.

- ``screen`` of one response: the config without what only the report reads (title,
  description, report, ledger, invented), with only that response and its own drivers, and
  without the series' presentation keys (label, unit) and the keys only the evidence stage
  reads (a response's draws and vintages, screen.draws and screen.real_time, the top-level
  joint). A driver's change reruns the screens of the responses it is screened against, and
  nothing else of the screen.
- ``evidence``: the config without what only the report reads. Labels and units stay in: the
  evidence table's sentences and effect units use them.
"""
from __future__ import annotations

import hashlib
import json

from lagsieve.io.config import Study
from lagsieve.io.names import slug

REPORT_ONLY = ("title", "description", "report", "ledger", "invented")
PRESENTATION = ("label", "unit")
#: Keys that only the evidence stage reads (draws and vintages of a response: stages.estimates).
EVIDENCE_ONLY_RESPONSE = ("draws", "vintages")
EVIDENCE_ONLY_SCREEN = ("draws", "real_time")
EVIDENCE_ONLY_TOP = ("joint",)  # the groups screened jointly (evidence.joint)


def _digest(obj) -> str:
    text = json.dumps(obj, sort_keys=True, default=str, ensure_ascii=True)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def _without(entry, keys) -> dict:
    entry = {"id": entry} if isinstance(entry, str) else dict(entry)
    return {k: v for k, v in entry.items() if k not in keys}


def evidence_settings(study: Study) -> dict:
    """What the align and evidence stages read of the config."""
    return {k: v for k, v in study.raw.items() if k not in REPORT_ONLY}


def screen_settings(study: Study, response: str) -> dict:
    """What the screen of ``response`` (its id or its file-name slug) reads of the config."""
    rid = {slug(r): r for r in study.response_ids}.get(response, response)
    mine = {d["id"] for d in study.drivers_for(rid)}
    raw = {k: v for k, v in evidence_settings(study).items() if k not in EVIDENCE_ONLY_TOP}
    own = {rid, study.season_of(rid)}  # a season response reads the response it comes from
    raw["responses"] = [_without(r, PRESENTATION + EVIDENCE_ONLY_RESPONSE) for r in raw["responses"]
                        if r["id"] in own]
    raw["drivers"] = [_without(d, PRESENTATION) for d in raw["drivers"] if d["id"] in mine]
    raw.pop("controls", None)  # read by the evidence stage only
    if isinstance(raw.get("screen"), dict):
        raw["screen"] = _without(raw["screen"], EVIDENCE_ONLY_SCREEN)
    return raw


def settings_digest(study: Study, stage: str, response: str | None = None) -> str:
    """A short digest of the settings ``stage`` (``screen`` with its response, or
    ``evidence``) reads; equal digests, equal settings."""
    if stage == "screen":
        return _digest(screen_settings(study, response))
    if stage == "evidence":
        return _digest(evidence_settings(study))
    raise ValueError(f"no settings digest for stage {stage!r}")
