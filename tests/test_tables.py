"""Model tables from saved fits: every printed number traced back to the JSON it came from."""

import copy
import csv
import io
import json
import re

import numpy as np
import pandas as pd
import pytest
from rich.console import Console
from rich.table import Table

import bigpanel
from bigpanel import BigPanelError
from bigpanel.output.tables import build_table, decimals_for, format_number, load_fits, render, to_csv, to_latex, to_markdown

NUMBER = re.compile(r"-?(\d+)(?:\.(\d+))?")
CELL = re.compile(r"(\()?([^()*]+)(\))?(\**)")
SPECS = [
    ("y ~ x1 + log_price + noise_x", {"fe": ["unit"]}),
    ("y ~ x1 + log_price + scaled_up", {"fe": ["unit", "period"], "cluster": "unit"}),
    ("y ~ log_price + scaled_down", {"fe": ["period"], "variance": "hc1"}),
]


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    """Three real fits saved as JSON; paths and the parsed documents."""
    rng = np.random.default_rng(7)
    units, periods = 40, 10
    unit = np.repeat(np.arange(units), periods)
    period = np.tile(np.arange(periods), units)
    a = rng.normal(0, 1, units)[unit]
    x1, price, noise, up, down = (rng.normal(size=unit.size) + 0.5 * a for _ in range(5))
    y = 0.8 * x1 - 1.5 * price + 0.3 * up + 0.2 * down + a + rng.normal(size=unit.size)
    df = pd.DataFrame({
        "unit": unit, "period": period, "y": y, "x1": x1, "log_price": price, "noise_x": noise,
        "scaled_up": up * 1e7,      # slope near 3e-8: printed in exponent form
        "scaled_down": down * 1e-7,  # slope near 2e6: printed in exponent form
    })
    folder = tmp_path_factory.mktemp("tables")
    source = folder / "panel.parquet"
    df.to_parquet(source)
    paths = []
    for i, (formula, options) in enumerate(SPECS, start=1):
        path = folder / f"fit{i}.json"
        path.write_text(bigpanel.fit(str(source), formula, **options).to_json())
        paths.append(str(path))
    return paths, [json.loads(open(p).read()) for p in paths]


def md_rows(text: str) -> list[list[str]]:
    lines = [line for line in text.splitlines() if line.startswith("|")]
    del lines[1]  # the alignment row
    return [[c.strip().replace(r"\|", "|") for c in re.split(r"(?<!\\)\|", line[1:-1])] for line in lines]


def latex_rows(text: str) -> list[list[str]]:
    body = text.split(r"\toprule")[1].split(r"\bottomrule")[0]
    lines = [line for line in body.splitlines() if line.strip() and line != r"\midrule"]
    return [[c.strip().replace(r"\_", "_") for c in line.removesuffix(r"\\").split(" & ")] for line in lines]


def csv_rows(text: str) -> list[list[str]]:
    rows = list(csv.reader(io.StringIO(text)))
    return [row for row in rows if len(row) == len(rows[0])]


FORMATS = {"markdown": (to_markdown, md_rows), "latex": (to_latex, latex_rows)}


def number(cell: str) -> tuple[float, int]:
    """The printed value (plain decimal notation only) and its number of decimals."""
    m = NUMBER.fullmatch(cell)
    assert m, cell
    return float(cell), len(m.group(2) or "")


def significant(cell: str) -> int:
    """Significant digits of a printed positive number."""
    return len(cell.replace(".", "").lstrip("0"))


def expected_stars(p: float) -> str:
    return "***" if p < 0.01 else "**" if p < 0.05 else "*" if p < 0.1 else ""


def check_grid(rows: list[list[str]], docs: list[dict], stars: bool, digits: int) -> None:
    """Every estimate and standard error equals its JSON value to half a unit in the last printed digit."""
    assert rows[0] == ["", "(1)", "(2)", "(3)"]
    names = list(dict.fromkeys(n for d in docs for n in d["coefficients"]))
    assert names == ["x1", "log_price", "noise_x", "scaled_up", "scaled_down"]
    for k, name in enumerate(names):
        est_row, se_row = rows[1 + 2 * k], rows[2 + 2 * k]
        assert est_row[0] == name and se_row[0] == ""
        for doc, est_cell, se_cell in zip(docs, est_row[1:], se_row[1:]):
            coef = doc["coefficients"].get(name)
            if coef is None:
                assert est_cell == se_cell == ""
                continue
            open_e, est, close_e, marks = CELL.fullmatch(est_cell).groups()
            open_s, se, close_s, no_marks = CELL.fullmatch(se_cell).groups()
            assert (open_e, close_e, open_s, close_s, no_marks) == (None, None, "(", ")", "")
            assert marks == (expected_stars(coef["p_value"]) if stars else "")
            # common practice: the s.e. to `digits` significant digits, its estimate to the same place
            assert significant(se) == digits or float(se) >= 10 ** (digits - 1), (name, se)
            for cell, ref in ((est, coef["estimate"]), (se, coef["std_error"])):
                value, decimals = number(cell)
                assert decimals == number(se)[1], (name, cell)
                assert abs(value - ref) <= 0.5 * 10.0 ** -decimals * (1 + 1e-9), (name, cell, ref)
    footer = {row[0]: row[1:] for row in rows[1 + 2 * len(names):]}
    assert [int(c.replace(",", "")) for c in footer["N"]] == [d["nobs"] for d in docs]
    assert all("," in c for c in footer["N"])  # 400 - singletons < 1,000 would have none
    assert footer["unit effects"] == ["yes", "yes", ""]
    assert footer["period effects"] == ["", "yes", "yes"]
    assert footer["variance"] == ["classical", "CR1: unit", "HC1"]
    assert footer["clusters: unit"] == ["", f"{docs[1]['vcov']['clusters']:,}", ""]
    for label, key in (("R-squared, full model", "r2_full_model"), ("within R-squared", "r2_within")):
        for cell, doc in zip(footer[label], docs):
            value, decimals = number(cell)
            assert decimals == 3 and abs(value - doc["fit"][key]) <= 0.0005 * (1 + 1e-9)
    assert list(footer) == ["N", "unit effects", "period effects", "clusters: unit", "variance",
                            "R-squared, full model", "within R-squared"]


@pytest.fixture(scope="module")
def saved_big(saved):
    """The same documents with N scaled up so the thousands separator shows."""
    docs = copy.deepcopy(saved[1])
    for d in docs:
        d["nobs"] *= 1000
    return docs


@pytest.mark.parametrize("fmt", FORMATS)
@pytest.mark.parametrize("stars", [False, True])
def test_cells_match_json(saved_big, fmt, stars):
    renderer, parse = FORMATS[fmt]
    check_grid(parse(renderer(build_table(saved_big, stars=stars))), saved_big, stars, 2)


@pytest.mark.parametrize("fmt", FORMATS)
def test_other_digits(saved_big, fmt):
    renderer, parse = FORMATS[fmt]
    check_grid(parse(renderer(build_table(saved_big, digits=3))), saved_big, False, 3)


def test_loaded_files_tabulate(saved):
    paths, docs = saved
    assert load_fits(paths) == docs
    rows = md_rows(to_markdown(build_table(load_fits(paths))))
    n_row = next(row for row in rows if row[0] == "N")
    assert n_row[1:] == [f"{d['nobs']:,}" for d in docs]


def test_plain_notation_for_tiny_and_huge_slopes(saved):
    rows = md_rows(to_markdown(build_table(saved[1])))
    by_name = {row[0]: row[1:] for row in rows if row[0]}
    assert "e" not in by_name["scaled_up"][1] and by_name["scaled_up"][1].startswith("0.0000000")
    assert "e" not in by_name["scaled_down"][2] and len(by_name["scaled_down"][2].split(".")[0]) >= 6


def test_csv_is_one_row_per_model_and_term(saved):
    paths, docs = saved
    rows = list(csv.DictReader(io.StringIO(to_csv(build_table(docs)))))
    assert [(r["model"], r["term"]) for r in rows] == [
        (f"({i})", name) for i, d in enumerate(docs, start=1) for name in d["coefficients"]]
    for r in rows:
        doc = docs[int(r["model"][1:-1]) - 1]
        coef = doc["coefficients"][r["term"]]
        for key in ("estimate", "std_error", "p_value", "ci_low", "ci_high"):
            assert float(r[key]) == coef[key]  # unrounded: the JSON number itself
        assert int(r["nobs"]) == doc["nobs"] and r["variance"] == doc["vcov"]["type"]
        assert float(r["r2_full_model"]) == doc["fit"]["r2_full_model"]


def test_latex_times_between_cluster_columns(saved):
    docs = copy.deepcopy(saved[1])
    docs[1]["vcov"]["clusters_per_column"] = {"unit": 40, "period": 10}
    text = to_latex(build_table(docs))
    assert r"CR1: unit $\times$ period" in text
    assert "clusters: period & " in text


def test_stars_only_when_asked(saved):
    docs = saved[1]
    for renderer, _ in FORMATS.values():
        assert "*" not in renderer(build_table(docs))
        starred = renderer(build_table(docs, stars=True))
        assert "***" in starred and "significance: *** p " in starred and " 0.01; ** p " in starred


def test_star_thresholds(saved):
    docs = copy.deepcopy(saved[1][:1])
    coefs = docs[0]["coefficients"]
    for coef, p in zip(coefs.values(), [0.009, 0.049, 0.099]):
        coef["p_value"] = p
    rows = md_rows(to_markdown(build_table(docs, stars=True)))
    assert [row[1][-3:].lstrip("0123456789.-") for row in rows[1:7:2]] == ["***", "**", "*"]
    coefs["x1"]["p_value"] = 0.1
    assert md_rows(to_markdown(build_table(docs, stars=True)))[1][1][-1] != "*"


def test_format_number():
    # common practice: two significant digits of the s.e. set the decimals of both numbers
    assert decimals_for(0.0123) == 3 and format_number(-1.80114, decimals_for(0.0123)) == "-1.801"
    assert decimals_for(0.99) == 2 and decimals_for(1.5) == 1 and decimals_for(123.0) == 0
    assert decimals_for(3.4e-9) == 10 and format_number(3.4e-9, 10) == "0.0000000034"
    assert format_number(12345678.0, 0) == "12345678"
    assert decimals_for(0.0123, 3) == 4
    assert format_number(None, 2) == "n/a"


def test_latex_rules_and_escapes(saved):
    docs = saved[1]
    text = to_latex(build_table(docs))
    assert text.index(r"\toprule") < text.index(r"\midrule") < text.index(r"\bottomrule")
    assert text.count(r"\midrule") == 2
    assert r"\begin{tabular}{lccc}" in text
    assert r"log\_price & " in text and not re.search(r"(?<!\\)_", text)
    labelled = to_latex(build_table(docs, labels=["a_b", "50% & #1", "{x}~^\\$"]))
    header = r" & a\_b & 50\% \& \#1 & \{x\}\textasciitilde{}\textasciicircum{}\textbackslash{}\$ \\"
    assert header in labelled.splitlines()


def test_labels_and_conditional_rows(saved):
    docs = saved[1]
    assert md_rows(to_markdown(build_table(docs, labels=["a", "b|c", "d"])))[0] == ["", "a", "b|c", "d"]
    with pytest.raises(BigPanelError, match="2 column labels for 3 fits"):
        build_table(docs, labels=["a", "b"])
    with pytest.raises(BigPanelError, match="at least one"):
        build_table([])
    other = copy.deepcopy(docs)
    other[1]["estimator"] = "pooled"
    other[2]["outcome"] = "log_y"
    rows = {row[0]: row[1:] for row in md_rows(to_markdown(build_table(other)))}
    assert rows["estimator"] == ["within", "pooled", "within"]
    assert rows["outcome"] == ["y", "y", "log_y"]


def test_render_dispatch(saved):
    table = build_table(saved[1])
    assert render(table, "markdown") == to_markdown(table)
    assert render(table, "latex") == to_latex(table)
    assert render(table, "csv") == to_csv(table)
    rich_table = render(table, "terminal")
    assert isinstance(rich_table, Table)
    buf = io.StringIO()
    Console(file=buf, width=160, no_color=True).print(rich_table)
    shown = buf.getvalue()
    assert "(3)" in shown and "CR1: unit" in shown
    x1 = saved[1][0]["coefficients"]["x1"]
    assert format_number(x1["estimate"], decimals_for(x1["std_error"])) in shown
    with pytest.raises(BigPanelError, match="terminal, markdown, latex, csv"):
        render(table, "html")


def test_load_errors_name_the_file(tmp_path, saved):
    missing = tmp_path / "nope.json"
    not_result = tmp_path / "other.json"
    not_result.write_text(json.dumps({"hello": 1}))
    broken = tmp_path / "broken.json"
    broken.write_text("{not json")
    listed = tmp_path / "list.json"
    listed.write_text("[1, 2]")
    for path in (missing, not_result, broken, listed):
        with pytest.raises(BigPanelError) as info:
            load_fits([saved[0][0], str(path)])
        message = str(info.value)
        assert str(path) in message and "\n" not in message
