"""Every published check value in chemistry/data/check_values.csv, one parametrised test.

Each row names its source in the ``source`` column.
"""

from __future__ import annotations

import csv
import math
from importlib import resources

import pytest

from chemistry import equilibrium_constants


def _rows():
    text = resources.files("chemistry").joinpath("data/check_values.csv").read_text()
    return list(csv.DictReader(text.splitlines()))


ROWS = _rows()


def test_check_value_file_covers_every_constant():
    # The issue asks for every constant of the set to be checked against a published value.
    quantities = {row["quantity"] for row in ROWS}
    expected = {"K0", "K1", "K2", "KB", "KW", "KS", "KF", "K1P", "K2P", "K3P", "KSi",
                "Ksp_calcite", "Ksp_aragonite"}
    assert expected <= quantities
    assert all(row["source"].strip() for row in ROWS)


@pytest.mark.parametrize(
    "row", ROWS, ids=[f"{r['quantity']}-{r['form']}-{r['temperature']}C-S{r['salinity']}"
                      for r in ROWS]
)
def test_published_check_value(row):
    constants = equilibrium_constants(
        float(row["temperature"]),
        float(row["salinity"]),
        pressure=float(row["pressure"]),
        carbonic=row["carbonic"],
    )
    value = float(constants[row["quantity"]])
    transform = {"ln": math.log, "log10": math.log10, "value": float}[row["form"]]
    assert transform(value) == pytest.approx(float(row["value"]), abs=float(row["tolerance"])), (
        row["source"]
    )
