"""Stan data readers (JSON and R dump).

Real files from ../shared/reference-data/cmdstan-outputs/: ``eight_schools.data.R``
(README: J = 8, the classic y and sigma, which are y = 28, 8, -3, 7, -1, 1, 18, 12
and sigma = 15, 10, 16, 11, 9, 11, 10, 18 in Rubin 1981 / Gelman et al., Bayesian
Data Analysis, table 5.2; from memory and identical to the file),
``logistic.data.R`` and ``bernoulli.data.json``. Expected values are read from the
file text with simple independent means (regular expressions, ``json``).
"""

from __future__ import annotations

import json
import re

import numpy as np

from auditor.loaders.stan_data import read_stan_data
from tests.conftest import require_shared


def _misc():
    return require_shared() / "cmdstan-outputs" / "cmdstanpy-misc"


def test_eight_schools_rdump():
    path = require_shared() / "cmdstan-outputs" / "arviz-eight-schools-nc" / "eight_schools.data.R"
    values, problems = read_stan_data(path)
    assert problems == []
    assert values["J"] == 8 and isinstance(values["J"], int)
    np.testing.assert_array_equal(values["y"], [28, 8, -3, 7, -1, 1, 18, 12])
    np.testing.assert_array_equal(values["sigma"], [15, 10, 16, 11, 9, 11, 10, 18])


def test_logistic_rdump_matrix_is_column_major():
    path = _misc() / "logistic.data.R"
    text = path.read_text()
    values, problems = read_stan_data(path)
    assert problems == []
    assert values["N"] == 128 and values["M"] == 2
    assert values["y"].shape == (128,)
    # Independent read: all numbers inside structure(c(...)), in file order.
    inner = re.search(r"structure\(c\((.*?)\),\s*\.Dim", text, re.S).group(1)
    numbers = [float(t) for t in inner.replace("\n", " ").split(",")]
    assert len(numbers) == 256
    x = values["x"]
    assert x.shape == (128, 2)
    # R fills columns first: the first 128 numbers are column 1 (the intercept, all 1).
    np.testing.assert_array_equal(x[:, 0], numbers[:128])
    np.testing.assert_array_equal(x[:, 1], numbers[128:])
    assert (x[:, 0] == 1).all()
    y_text = re.search(r"y <-\s*c\((.*?)\)", text, re.S).group(1)
    np.testing.assert_array_equal(values["y"], [int(t) for t in y_text.split(",")])


def test_bernoulli_json():
    path = _misc() / "bernoulli.data.json"
    expected = json.loads(path.read_text())
    values, problems = read_stan_data(path)
    assert problems == []
    assert values["N"] == expected["N"] == 10
    np.testing.assert_array_equal(values["y"], expected["y"])
    assert values["y"].dtype.kind == "i"


def test_malformed_json_names_the_line(tmp_path):
    path = tmp_path / "bad.json"
    path.write_text('{\n  "N": 3,\n  "y": [1, 2,\n  ]\n}\n')
    values, problems = read_stan_data(path)
    assert values == {}
    assert len(problems) == 1
    assert problems[0].path == path and problems[0].line == 4
    assert "not valid JSON" in problems[0].message


def test_json_special_values_and_bad_members(tmp_path):
    path = tmp_path / "d.json"
    path.write_text(
        '{"N": 2,\n "m": [[1.5, 2], [3, 4]],\n "z": "-Inf",\n "r": [[1, 2], [3]],\n'
        ' "t": true,\n "e": []}\n'
    )
    values, problems = read_stan_data(path)
    assert values["m"].shape == (2, 2) and values["m"][1, 0] == 3.0  # row-major
    assert values["z"] == -np.inf
    assert values["e"].size == 0
    assert {p.line for p in problems} == {4, 5}
    assert "ragged" in next(p.message for p in problems if p.line == 4)
    assert "r" not in values and "t" not in values
    _, top = read_stan_data(tmp_path / "absent.json")
    assert "cannot read" in top[0].message


def test_rdump_forms_and_errors(tmp_path):
    path = tmp_path / "d.data.R"
    path.write_text(
        "a <- 1:4\n"
        "b <- -3.5e2\n"
        '"c" = c(1L, 2L)\n'
        "d <- structure(c(1, 2, 3, 4, 5, 6), .Dim = c(2, 3))\n"
        "e <- c(1, oops, 3)\n"
        "f <- integer(0)\n"
        "g <- c(Inf, -Inf, NA)\n"
        "h <- structure(c(1, 2, 3), .Dim = c(2, 2))\n"
        "k <- 2.5\n"
    )
    values, problems = read_stan_data(path)
    np.testing.assert_array_equal(values["a"], [1, 2, 3, 4])
    assert values["b"] == -350.0
    np.testing.assert_array_equal(values["c"], [1, 2])
    # R's column-major fill: matrix(1:6, 2, 3) has first row 1, 3, 5 (R semantics).
    np.testing.assert_array_equal(values["d"], [[1, 3, 5], [2, 4, 6]])
    assert values["f"].size == 0
    assert values["g"][0] == np.inf and values["g"][1] == -np.inf and np.isnan(values["g"][2])
    assert values["k"] == 2.5
    assert "e" not in values and "h" not in values
    lines = {p.line: p.message for p in problems}
    assert set(lines) == {5, 8}
    assert "'oops'" in lines[5] and "'e'" in lines[5]
    assert "needs 4 values but 3 are given" in lines[8]


def test_rdump_unclosed_vector_does_not_swallow_next_variable(tmp_path):
    path = tmp_path / "d.R"
    path.write_text("e <- c(1, 2\nf <- 3\ng <- structure(c(1, 2), .Dim = c(2L))\n")
    values, problems = read_stan_data(path)
    assert values["f"] == 3
    np.testing.assert_array_equal(values["g"], [1, 2])
    assert len(problems) == 1 and "'e'" in problems[0].message and problems[0].line == 2


def test_rdump_garbage(tmp_path):
    path = tmp_path / "junk.R"
    path.write_text("this is not data\n@@@\nn <- 3\n")
    values, problems = read_stan_data(path)
    assert values == {"n": 3}
    assert problems and problems[0].line == 1 and problems[0].path == path
