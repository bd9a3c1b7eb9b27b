"""Snakemake's own report (`snakemake --report`) lists the study's figures like a catalogue:
every figure once, labelled by study, response, driver and figure kind (series by their
labels), with one caption per kind (lagsieve.stages.catalog, workflow/report/figures.rst).
The report's data are read back from the HTML Snakemake writes (its `results` object)."""
from __future__ import annotations

import json
import re
import subprocess
import sys
import zipfile
from types import SimpleNamespace

import pytest
import yaml

from lagsieve.stages.catalog import FIGURE_PATTERNS, figure_labels

from helpers import REPO


def _report_results(tmp_path, out) -> dict:
    zipped = tmp_path / "catalogue.zip"
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--configfile",
           str(out / "work" / "run_config.yaml"), "--directory", str(out.parent), "--report", str(zipped)]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr[-3000:]
    with zipfile.ZipFile(zipped) as z:
        # the catalogue's own page (the study's report.html is in it too, under data/)
        html = z.read(min((n for n in z.namelist() if n.endswith("report.html")), key=len)).decode()
    return json.loads(re.search(r"var results = (\{.*?\});\n", html, re.S).group(1))


@pytest.mark.slow
def test_snakemake_report_lists_every_figure_once_with_labels_and_a_caption_per_kind(demo_run, tmp_path):
    cfg, out = demo_run
    results = _report_results(tmp_path, out)
    figures = {v["name"]: v for k, v in results.items() if "/figures/" in k}
    assert set(figures) == {p.name for p in (out / "figures").glob("*.png")}
    raw = yaml.safe_load(cfg.read_text())
    label = {s["id"]: s.get("label", s["id"]) for s in raw["responses"] + raw["drivers"]}
    name = sorted(n for n in figures if n.startswith("m--age2__") and n.endswith("__lags.png"))[0]
    driver = name.split("__")[1]  # a driver id is its own file-name slug (no ':' in it)
    assert figures[name]["labels"] == {"study": "caldrin_shelf_demo", "response": label["m:age2"],
                                       "driver": label[driver], "figure": "lags"}
    assert figures["coverage.png"]["labels"] == {"study": "caldrin_shelf_demo", "response": "-", "driver": "-",
                                                 "figure": "coverage"}
    assert figures["partition__m--age2.png"]["labels"]["response"] == label["m:age2"]
    caption = {name: re.sub(r"<.*?>", "", v["caption"]).split("\n")[0] for name, v in figures.items()}
    kinds = {}
    for name, text in caption.items():
        kinds.setdefault(figures[name]["labels"]["figure"], set()).add(text)
    assert all(len(texts) == 1 for texts in kinds.values())  # one caption per kind...
    first = [next(iter(t)) for t in kinds.values()]
    assert len(set(first)) == len(first)  # ...and a different one for every kind
    assert not any(t.startswith("A figure of the screening report") for t in first)  # none left generic


@pytest.mark.parametrize("name, expected", [
    ("m--age2__forage_biomass__lags.png", {"response": "m--age2", "driver": "forage_biomass", "kind": "lags"}),
    ("partition__kn--young.png", {"kind": "partition", "response": "kn--young"}),
    ("driver_correlation.png", {"kind": "driver_correlation"}),
    ("windows__m--age2__forage_biomass.png", {"kind": "windows", "response": "m--age2", "driver": "forage_biomass"}),
    ("joint__m__bottom_temp.png", {"kind": "joint", "response": "m", "driver": "bottom_temp"}),
])
def test_each_figure_name_matches_exactly_one_pattern(name, expected):
    """The patterns keep hypothesis, response and study figures apart (Snakemake's
    regex_from_filepattern is the engine's own reading of a pattern)."""
    from snakemake.io import regex_from_filepattern

    matches = [m.groupdict() for p in FIGURE_PATTERNS if (m := re.match(regex_from_filepattern(p), name))]
    assert matches == [expected]


def test_labels_use_the_series_labels():
    study = SimpleNamespace(id="s", responses=[{"id": "m:age2", "label": "M age 2"}],
                            drivers=[{"id": "sst"}])
    assert figure_labels(study, {"response": "m--age2", "driver": "sst", "kind": "gam"}) == \
        {"study": "s", "response": "M age 2", "driver": "sst", "figure": "gam"}
