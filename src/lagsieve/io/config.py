"""Study configuration: safe YAML loading, JSON-Schema validation, defaults and paths.

Relative paths inside a config resolve against the config file's own folder, so a study
runs the same from any working directory. Defaults are written once, as ``default`` values
in the schema (``workflow/schemas/config.schema.yaml``); :func:`fill_defaults` fills them in.
"""
from __future__ import annotations

import copy
import importlib.resources
import functools
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from lagsieve.errors import InputErrors, InputProblem, closest, item_key, show, suggest
from lagsieve.io.names import name_key, periodic
from lagsieve.io.yamlfile import read_yaml

# libyaml's safe loader when PyYAML was built with it (same safety, about ten times faster)
SafeLoader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)

YEAR_CONTROL = "year"  # the control that is a plain linear trend, not a series of the inputs
WORKFLOW = importlib.resources.files("lagsieve.workflow")  # the Snakefile, rules and schema
SCHEMA_FILE = WORKFLOW / "schemas" / "config.schema.yaml"

@dataclass
class Study:
    """A validated study: the raw config plus resolved paths and filled defaults."""

    path: Path
    raw: dict
    id: str
    base_dir: Path
    inputs: list[dict]
    responses: list[dict]
    drivers: list[dict]
    screen: dict
    report: dict
    ledger_path: str | None = None
    condition: dict | None = None  # the ``condition:`` section with its defaults, when present
    joint: tuple[str, ...] = ()  # series whose groups are also screened jointly (``joint:``)
    controls: list[dict] = field(default_factory=list)  # ``controls:`` with defaults filled
    seasons: dict[str, tuple[int, ...]] = field(default_factory=dict)  # ``seasons:`` (or the condition's)

    def season_of(self, response_id: str) -> str | None:
        """The response a season response (``<id>-<season>`` of ``by_season``) was made from."""
        r = next((r for r in self.responses if r["id"] == response_id), None)
        return None if r is None else r.get("season_of")

    def _base(self, response_id: str) -> str:
        return self.season_of(response_id) or response_id

    @property
    def control_series(self) -> list[dict]:
        """The controls that are series of the inputs (all but the trend ``year``)."""
        return [c for c in self.controls if c["id"] != YEAR_CONTROL]

    def controls_for(self, response_id: str) -> dict[str, int]:
        """The controls of one response: id -> its lag with the response."""
        base = self._base(response_id)
        return {c["id"]: int(c["lag"]) for c in self.controls
                if not c.get("responses") or base in c["responses"]}

    @property
    def response_ids(self) -> list[str]:
        return [r["id"] for r in self.responses]

    @property
    def driver_ids(self) -> list[str]:
        return [d["id"] for d in self.drivers]

    def series_options(self) -> dict[str, dict]:
        """Per-series options (transform, aggregate, fill, max_gap, unit) by id."""
        out = {}
        for s in self.responses + self.drivers + self.control_series:
            out[s["id"]] = {k: s[k] for k in ("transform", "aggregate", "fill", "max_gap", "unit", "season_of",
                                              "season_months") if k in s}
        return out

    def input_paths(self) -> list[Path]:
        """Every input file's path, resolved against the config's folder (absolute paths kept)."""
        return [self.base_dir / spec["path"] for spec in self.inputs]  # `/` keeps an absolute path

    def transforms(self) -> dict[str, str]:
        """The configured transform of every series, by id."""
        return {s["id"]: s.get("transform", "none") for s in self.responses + self.drivers + self.control_series}

    def drivers_for(self, response_id: str) -> list[dict]:
        """The drivers paired with a response, each with the sign expected for that response (a
        season response takes those of the response it comes from)."""
        base = self._base(response_id)
        return [signed_for(d, base) for d in self.drivers if not d.get("responses") or base in d["responses"]]

    def lags_for(self, driver: dict) -> list[int]:
        return sorted(driver.get("lags") or self.screen["lags"])

    def joint_groups(self) -> dict[str, list[str]]:
        """Every series of ``joint:`` with its group responses (``series:group``), in config order."""
        plain = [r["id"] for r in self.responses if not r.get("season_of")]
        return {s: group_responses(plain, s) for s in self.joint}


def group_responses(response_ids: list[str], series: str) -> list[str]:
    """The responses that are groups of ``series`` (ids ``series:group``), in the given order."""
    return [r for r in response_ids if r.partition(":")[0] == series and ":" in r]


def joint_problems(joint: list[str], response_ids: list[str], shown: str) -> list[InputProblem]:
    """One line per ``joint:`` entry that does not name a series with two or more groups."""
    problems = []
    series = sorted({r.partition(":")[0] for r in response_ids if ":" in r})
    for i, s in enumerate(joint):
        key = f"joint[{i + 1}] ('{s}')"
        groups = group_responses(response_ids, s)
        if ":" in s:
            what, fix = (f"names the group response '{s}', not a series",
                         f"name the series, the part before ':' ('{s.partition(':')[0]}')")
        elif not groups:
            what, fix = "names no series with groups among the responses", \
                f"use a series whose groups are listed under responses as '<series>:<group>' ({suggest(s, series, 'series with groups')})"
        elif len(groups) == 1:
            what, fix = (f"series '{s}' has a single group among the responses ('{groups[0]}'); a joint screen "
                         "needs two or more", f"list its other groups under responses, or remove '{s}' from joint")
        else:
            continue
        problems.append(InputProblem(what=what, fix=fix, file=shown, key=key))
    return problems


def control_problems(controls: list[dict], drivers: list[dict], response_ids: list[str],
                     shown: str) -> list[InputProblem]:
    """One line per ``controls:`` entry that repeats another, is a response, names a response
    that is not one, or is also a driver of a response it applies to (a control is accounted for
    in every test of that response, so it cannot also be tested there)."""
    problems, seen = [], set()
    for i, c in enumerate(controls):
        cid, key = c["id"], item_key("controls", i, c["id"])
        applies = c.get("responses") or response_ids
        unknown = [r for r in c.get("responses") or [] if r not in response_ids]
        both = [r for r in applies if any(d["id"] == cid and (not d.get("responses") or r in d["responses"])
                                          for d in drivers)]
        if cid in seen:
            problems.append(InputProblem(what="listed twice in controls", fix="give each control one entry",
                                         file=shown, key=key))
        elif cid in response_ids:
            problems.append(InputProblem(what="is a response; a response cannot be a control",
                                         fix="remove it from controls", file=shown, key=key))
        elif unknown:
            problems.append(InputProblem(what=f"names response '{unknown[0]}', which is not in responses",
                                         fix=f"use an id listed under responses ({suggest(unknown[0], response_ids, 'responses')})",
                                         file=shown, key=f"{key}.responses"))
        elif both:
            problems.append(InputProblem(
                what=f"is also a driver of response '{both[0]}'; a control is accounted for in every test of a "
                     "response, so it cannot be tested there too",
                fix="keep it in drivers or in controls, or restrict one of them to other responses with responses",
                file=shown, key=key))
        seen.add(cid)
    return problems


def season_responses(responses: list[dict], seasons: dict | None, taken: set[str], shown: str
                     ) -> tuple[list[dict], list[InputProblem]]:
    """The responses with, after every one with ``by_season``, one response per season
    (``<id>-<season>``, seasons in the order of the year by their last month): its ``season``,
    ``season_of`` (the response it comes from) and ``season_months``. One line for a
    ``by_season`` response without seasons, for seasons that share a month, and for a season
    response whose id is already a series of the study."""
    out, problems = [], []
    usable = isinstance(seasons, dict) and all(
        isinstance(v, list) and v and all(isinstance(m, int) and 1 <= m <= 12 for m in v) for v in seasons.values())
    for i, r in enumerate(responses):
        out.append(r)
        if not r.get("by_season"):
            continue
        key = item_key("responses", i, r["id"], "by_season")
        if not usable or len(seasons) < 2:
            problems.append(InputProblem(what="by_season is true but the study has no seasons (two or more)",
                                         fix="add seasons: {name: [months], ...} at the top level, or a condition "
                                             "section with seasons", file=shown, key=key))
            continue
        owner = {}
        for name, months in seasons.items():
            clash = next((owner[m] for m in months if m in owner), None)
            if clash:
                problems.append(InputProblem(what=f"seasons '{clash}' and '{name}' share a month",
                                             fix="give every month to one season only", file=shown, key="seasons"))
            owner.update(dict.fromkeys(months, name))
        for name, months in sorted(seasons.items(), key=lambda kv: kv[1][-1]):
            sid = f"{r['id']}-{name}"
            if sid in taken:
                problems.append(InputProblem(what=f"by_season makes the response '{sid}', which is already listed",
                                             fix=f"remove '{sid}' from the config, or by_season from '{r['id']}'",
                                             file=shown, key=key, series=sid))
            label = {"label": f"{r['label']} ({name})"} if r.get("label") else {}
            out.append({"id": sid, "kind": r.get("kind", "other"), "transform": r.get("transform", "none"),
                        **{k: r[k] for k in ("unit",) if k in r}, **label, "season": name, "season_of": r["id"],
                        "season_months": {"months": list(months), "how": (r.get("aggregate") or {}).get("how", "mean")}})
    return out, problems


def signed_for(driver: dict, response_id: str) -> dict:
    """The driver's entry with ``expected_sign`` as stated for ``response_id``: its
    ``expected_sign_by_response`` entry where there is one (prey lowers M but raises condition),
    else its ``expected_sign``."""
    by = driver.get("expected_sign_by_response") or {}
    return dict(driver, expected_sign=by[response_id]) if response_id in by else driver


@functools.lru_cache(maxsize=1)
def _schema() -> dict:
    """The config schema, read once per process (do not modify the returned mapping)."""
    with SCHEMA_FILE.open(encoding="utf-8") as fh:
        return yaml.load(fh, Loader=SafeLoader)


@functools.lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    """The config schema's validator, built once per process (planning thousands of studies
    would otherwise re-read and re-compile the schema for each)."""
    return jsonschema.Draft202012Validator(_schema())


def _resolve(schema: dict, root: dict) -> dict:
    """Follow a local ``$ref`` (``#/definitions/...``) to the schema it names."""
    while "$ref" in schema:
        node = root
        for part in schema["$ref"].removeprefix("#/").split("/"):
            node = node[part]
        schema = node
    return schema


def fill_defaults(instance: Any, schema: dict | None = None, root: dict | None = None) -> Any:
    """A copy of ``instance`` with the schema's ``default`` filled in for every absent key.

    Walks objects through ``properties`` (a present value is kept; a filled default is
    filled in turn, so ``screen: {}`` gets its keys), arrays through ``items``, and follows
    local ``$ref``. Defaulted keys come first, in the schema's order, then the others in the
    config's order. ``instance`` is not modified. Without ``schema``, the config schema.
    """
    root = root if root is not None else (schema if schema is not None else _schema())
    schema = _resolve(schema if schema is not None else root, root)
    if isinstance(instance, dict) and isinstance(schema.get("properties"), dict):
        props = {k: _resolve(v, root) for k, v in schema["properties"].items()}
        out = {k: sub["default"] for k, sub in props.items() if "default" in sub}
        out.update(instance)
        return {k: fill_defaults(v, props[k], root) if k in props else copy.deepcopy(v)
                for k, v in out.items()}
    if isinstance(instance, list) and isinstance(schema.get("items"), dict):
        return [fill_defaults(v, schema["items"], root) for v in instance]
    return copy.deepcopy(instance)


def whole_numbers(instance: Any, schema: dict | None = None, root: dict | None = None) -> Any:
    """A copy of a validated ``instance`` in which every float at a place the schema types
    ``integer`` becomes an int (``seed: 1.0`` -> 1). JSON Schema counts 1.0 as an integer, so
    validation lets it through; the code then needs a real int. Other floats there were
    already refused by validation."""
    root = root if root is not None else (schema if schema is not None else _schema())
    schema = _resolve(schema if schema is not None else root, root)
    for branch in schema.get("oneOf", []) + schema.get("anyOf", []):  # the branch of the instance's kind
        if (branch.get("type") == "object") == isinstance(instance, dict):
            schema = _resolve(branch, root)
            break
    kind = schema.get("type")
    kinds = kind if isinstance(kind, list) else [kind]
    if isinstance(instance, float) and "integer" in kinds and instance.is_integer():
        return int(instance)
    if isinstance(instance, dict):
        props = schema.get("properties") or {}
        return {k: whole_numbers(v, props[k], root) if k in props else v for k, v in instance.items()}
    if isinstance(instance, list) and isinstance(schema.get("items"), dict):
        return [whole_numbers(v, schema["items"], root) for v in instance]
    return instance


def screen_defaults() -> dict[str, Any]:
    """The ``screen`` settings of a config that gives none (a fresh copy each call)."""
    return fill_defaults({})["screen"]


def report_defaults() -> dict[str, Any]:
    """The ``report`` settings of a config that gives none (a fresh copy each call)."""
    return fill_defaults({})["report"]


# The screen settings of a config that gives none, computed from the schema; kept as a
# module value for code that starts from them (benchmarks, tests): copy before changing.
SCREEN_DEFAULTS: dict[str, Any] = screen_defaults()


def _key_path(err: jsonschema.ValidationError, raw: Any = None) -> str:
    """The key of a schema error, list positions one-based and named by the entry's id:
    ``drivers[2] (id 'shrimp_index').category`` (common practice of config checkers)."""
    text, node = "", raw
    for part in err.absolute_path:
        if isinstance(part, int):
            item = node[part] if isinstance(node, list) and part < len(node) else None
            sid = item.get("id") if isinstance(item, dict) and isinstance(item.get("id"), str) else None
            text = item_key(text, part, sid)
        else:
            text = f"{text}.{part}" if text else str(part)
            item = node.get(part) if isinstance(node, dict) else None
        node = item
    return text or "(top level)"


def _schema_problem(err: jsonschema.ValidationError, file: str, raw: Any = None) -> InputProblem:
    key = _key_path(err, raw)
    v = err.validator
    if v == "additionalProperties":
        allowed = sorted(err.schema.get("properties", {}))
        extra = sorted(set(err.instance) - set(allowed))
        hints = [f"did you mean '{m}' for '{k}'?" if (m := closest(k, allowed)) else f"remove '{k}'"
                 for k in extra]
        return InputProblem(
            what=f"unknown key(s) {', '.join(map(repr, extra))}",
            fix=f"{'; '.join(hints)} (allowed here: {', '.join(allowed)})", file=file, key=key)
    if v == "required":
        return InputProblem(what=show(err.message, 200), fix="add the key (see config/README.md)", file=file, key=key)
    if v == "enum":
        options = [str(o) for o in err.validator_value]
        near = closest(err.instance, options) if isinstance(err.instance, str) else None
        hint = f"did you mean '{near}'? " if near else ""
        return InputProblem(
            what=f"value {show(repr(err.instance), 60)} is not allowed",
            fix=f"{hint}use one of {', '.join(options)}", file=file, key=key)
    if v == "pattern":
        return InputProblem(
            what=f"value {show(repr(err.instance), 60)} has characters that are not allowed",
            fix="use letters, digits, '_', '.', '-' (and one ':' between a series and its group); study ids use lower case only",
            file=file, key=key)
    return InputProblem(what=show(err.message, 200), fix="correct the value (see config/README.md)", file=file, key=key)


def load_study(path: str | Path) -> Study:
    """Load and validate a study config; raise :class:`InputErrors` listing every problem."""
    path = Path(path)
    shown = str(path)
    if path.exists() and not path.is_file():
        kind = "a folder without config.yaml" if path.is_dir() else "not a regular file (a pipe or a device)"
        raise InputErrors([InputProblem(what=f"the config path is {kind}", fix="give the study folder that holds "
                                        "config.yaml, or the path of the study's config file (a .yaml file)", file=shown)])
    if not path.is_file():
        raise InputErrors([InputProblem(what="config file not found", fix="give the path to an existing study config (lagsieve init DIR writes one)", file=shown)])
    raw = read_yaml(path, shown)
    if not isinstance(raw, dict):
        raise InputErrors([InputProblem(what="config is empty or not a mapping of keys", fix="start from the config that `lagsieve init` writes", file=shown)])
    errs = sorted(_validator().iter_errors(raw), key=lambda e: list(map(str, e.absolute_path)))
    problems = [_schema_problem(e, shown, raw) for e in errs]
    if problems:
        raise InputErrors(problems)
    return _build(path, whole_numbers(raw))


def _name_clashes(series_ids: list[str], study_id: str, shown: str) -> list[InputProblem]:
    """Series whose file names would meet (cannot happen short of a hash clash, see
    :mod:`lagsieve.io.names`), and a study id the workflow engine would misread."""
    problems = []
    if periodic(study_id):
        problems.append(InputProblem(
            what=f"study id '{study_id}' ends in a piece repeated 20 times or more, which the workflow "
                 "engine refuses as a folder name", fix="shorten the repeated end of the id", file=shown, key="study"))
    names: dict[str, str] = {}
    for sid in series_ids:
        key = name_key(sid)
        if key in names:
            problems.append(InputProblem(what=f"clashes with series '{names[key]}' once made a file name",
                                         fix="rename one of them", file=shown, series=sid))
        names[key] = sid
    return problems


def _build(path: Path, raw: dict) -> Study:
    shown = str(path)
    problems: list[InputProblem] = []
    base = path.resolve().parent
    inputs = []
    for i, spec in enumerate(raw["inputs"]):
        spec = {"path": spec} if isinstance(spec, str) else dict(spec)
        inputs.append(spec)
    ids: dict[str, str] = {}
    for role in ("responses", "drivers"):
        for i, s in enumerate(raw[role]):
            sid = s["id"]
            if sid in ids:
                problems.append(InputProblem(what=f"listed twice (in {ids[sid]} and {role})", fix="give each series one entry", file=shown, key=item_key(role, i, sid), series=sid))
            ids[sid] = role
    problems += _name_clashes(list(ids), raw["study"], shown)
    full = fill_defaults(raw)
    responses, drivers = full["responses"], full["drivers"]
    resp_ids = {r["id"] for r in responses}
    for i, d in enumerate(drivers):
        for key in ("responses", "expected_sign_by_response"):
            for rid in d.get(key, []) or []:
                if rid not in resp_ids:
                    problems.append(InputProblem(
                        what=f"names response '{rid}', which is not in responses",
                        fix=f"use an id listed under responses ({suggest(rid, resp_ids, 'responses')})",
                        file=shown, key=item_key("drivers", i, d["id"], key), series=d["id"]))
    problems += joint_problems(full["joint"], [r["id"] for r in responses], shown)
    seasons = full.get("seasons") or (full.get("condition") or {}).get("seasons")
    responses, more = season_responses(responses, seasons, set(ids), shown)
    problems += more
    controls = full.get("controls") or []
    problems += control_problems(controls, drivers, [r["id"] for r in responses], shown)
    if problems:
        raise InputErrors(problems)
    ledger = (raw.get("ledger") or {}).get("path")
    return Study(path=path.resolve(), raw=raw, id=raw["study"], base_dir=base, inputs=inputs,
                 responses=responses, drivers=drivers, screen=full["screen"], report=full["report"],
                 ledger_path=ledger, condition=full.get("condition"), joint=tuple(full["joint"]),
                 controls=controls, seasons=dict(seasons) if any(r.get("season") for r in responses) else {})
