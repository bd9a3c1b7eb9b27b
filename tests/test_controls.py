"""`controls:` series every driver is tested given (issue: competing explanations): the config
check, the series they bring into the study table, and the evidence stage's per-response
controls. The conditional statistics with controls are checked against statsmodels in
tests/test_conditional.py (test_controls_enter_every_test)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lagsieve.errors import InputErrors
from lagsieve.io.config import load_study
from lagsieve.stages.check import check_study
from lagsieve.stages.evidence import by_response, with_controls


def _study(tmp_path, controls: str, drivers: str = "[{id: x}, {id: f, responses: [k]}]"):
    years = range(1980, 2020)
    rng = np.random.default_rng(3)
    rows = "".join(f"{y},{rng.normal():.3f},{rng.normal():.3f},{rng.normal():.3f},{rng.normal():.3f}\n" for y in years)
    (tmp_path / "d.csv").write_text("year,m,k,x,f\n" + rows)
    cfg = tmp_path / "c.yaml"
    cfg.write_text(f"study: s1\ninputs: [d.csv]\nresponses: [{{id: m}}, {{id: k}}]\ndrivers: {drivers}\n"
                   f"controls: {controls}\n")
    return cfg


def test_every_bad_control_is_one_line_in_one_pass(tmp_path):
    """Common practice of config checkers: one line per problem, all at once, the entry named
    one-based with its id."""
    cfg = _study(tmp_path, "[{id: f}, {id: year}, {id: m}, {id: year}, {id: z, responses: [mm]}]")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    lines = str(info.value).splitlines()
    assert len(lines) == 4
    assert lines[0].startswith(f"{cfg}: controls[1] (id 'f'): is also a driver of response 'k'")
    assert lines[1].startswith(f"{cfg}: controls[3] (id 'm'): is a response")
    assert lines[2].startswith(f"{cfg}: controls[4] (id 'year'): listed twice in controls")
    assert lines[3].startswith(f"{cfg}: controls[5] (id 'z').responses: names response 'mm'")
    assert "did you mean 'm'?" in lines[3]


def test_a_control_no_input_holds_is_named_and_year_needs_none(tmp_path):
    cfg = _study(tmp_path, "[{id: year}, {id: fishing}]")
    with pytest.raises(InputErrors) as info:
        check_study(cfg)
    (line,) = str(info.value).splitlines()
    assert line.startswith(f"{cfg}: controls[2] (id 'fishing').id: no input file holds this series")


def test_controls_apply_to_their_responses_and_join_the_study_table(tmp_path):
    """A control restricted to a response where the same series is no driver is allowed; its
    values are read and transformed like any series; `year` is a column of the year itself."""
    cfg = _study(tmp_path, "[{id: f, lag: 1, responses: [m], transform: none}, {id: year}]")
    study, annual, _, _ = check_study(cfg)
    assert study.controls_for("m") == {"f": 1, "year": 0} and study.controls_for("k") == {"year": 0}
    assert set(annual["series"]) == {"m", "k", "x", "f"}
    table = with_controls(study, pd.DataFrame({"m": [1.0, 2.0]}, index=pd.Index([2001, 2002], name="year")))
    assert table["year"].tolist() == [2001.0, 2002.0]


def test_each_response_is_tested_given_its_own_controls(tmp_path):
    study = load_study(_study(tmp_path, "[{id: f, lag: 1, responses: [m]}, {id: year}]"))
    ev = pd.DataFrame({"response": ["k", "m", "m"], "driver": ["x", "x", "f"]})
    seen = by_response(ev, study, lambda rows, c: pd.DataFrame({"response": [rows["response"].iat[0]],
                                                                "controls": ["+".join(sorted(c))]}), ["response"])
    assert seen.to_dict("list") == {"response": ["k", "m"], "controls": ["year", "f+year"]}
