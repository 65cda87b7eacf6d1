"""``spatline carbonate``: table, JSON and exit codes."""

from __future__ import annotations

import json

import pytest

from app.cli import main
from chemistry import DOSING_CAUTION, add_chemical, at_temperature, seawater_density, solve

BASE = [
    "carbonate",
    "--temperature",
    "12",
    "--salinity",
    "31",
    "--ph",
    "7.78",
    "--ph-scale",
    "nbs",
    "--alkalinity",
    "2150",
]


def test_table_shows_in_situ_tank_dose_and_target(capsys):
    code = main(
        [
            *BASE,
            "--tank-temperature",
            "25",
            "--dose",
            "sodium_carbonate:10",
            "--target-omega",
            "2.5",
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "omega aragonite" in out
    assert "in situ" in out and "tank 25 C" in out and "+10 mg/L" in out
    assert "Dose for omega aragonite 2.5:" in out
    assert DOSING_CAUTION in out
    # NBS pH is flagged as uncertain.
    assert "NBS" in out and "Warning:" in out


def test_json_matches_the_library(capsys):
    code = main(
        [
            *BASE,
            "--tank-temperature",
            "25",
            "--dose",
            "sodium_carbonate:10",
            "--target-omega",
            "2.5",
            "--json",
        ]
    )
    assert code == 0
    payload = json.loads(capsys.readouterr().out)
    in_situ = solve(temperature=12, salinity=31, ph=7.78, ph_scale="nbs", alkalinity=2150)
    tank = at_temperature(in_situ, 25.0)
    dosed = add_chemical(tank, "sodium_carbonate", 10.0)
    assert payload["in_situ"]["omega_aragonite"] == pytest.approx(float(in_situ.omega_aragonite))
    assert payload["tank"]["omega_aragonite"] == pytest.approx(float(tank.omega_aragonite))
    assert payload["after_dose"]["state"]["omega_aragonite"] == pytest.approx(
        float(dosed.omega_aragonite)
    )
    # 10 mg/L / 105.988 mg/mmol Na2CO3 (IUPAC2007 atomic weights), 2 equivalents per mole
    # (carbonate takes up two protons), per kg at the tank density.
    expected = 10.0 / 105.988 * 2.0 * 1e6 / float(seawater_density(25.0, 31.0))
    assert payload["after_dose"]["alkalinity_added"] == pytest.approx(expected, rel=1e-4)
    assert payload["target"]["state"]["omega_aragonite"] == pytest.approx(2.5, abs=1e-3)
    assert payload["target"]["mg_per_l"] > 0
    assert payload["caution"] == DOSING_CAUTION
    assert payload["chemistry_version"]
    assert payload["warnings"]


def test_refused_target_is_reported_not_an_error(capsys):
    code = main([*BASE, "--target-omega", "6", "--json"])
    payload = json.loads(capsys.readouterr().out)
    assert code == 0
    assert "above 5" in payload["target"]["refused"]
    assert payload["caution"] == DOSING_CAUTION


def test_without_dose_no_caution_in_json(capsys):
    assert main([*BASE, "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["tank"] is None and payload["after_dose"] is None
    assert "caution" not in payload


@pytest.mark.parametrize(
    ("argv", "field"),
    [
        (
            [
                "carbonate",
                "--temperature",
                "12",
                "--salinity",
                "61",
                "--ph",
                "7.8",
                "--alkalinity",
                "2150",
            ],
            "salinity",
        ),
        (
            [
                "carbonate",
                "--temperature",
                "12",
                "--salinity",
                "31",
                "--ph",
                "15",
                "--alkalinity",
                "2150",
            ],
            "ph",
        ),
        (["carbonate", "--temperature", "12", "--salinity", "31", "--ph", "7.8"], "two"),
        ([*BASE, "--tank-temperature", "60"], "temperature"),
    ],
)
def test_bad_value_is_one_sentence_on_stderr_and_exit_2(capsys, argv, field):
    assert main(argv) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    message = captured.err.strip()
    assert field in message
    assert "\n" not in message


@pytest.mark.parametrize(
    "extra",
    [
        ["--dose", "lime:5"],
        ["--dose", "sodium_carbonate:-3"],
        ["--dose", "sodium_carbonate"],
        ["--ph-scale", "mystery"],
        ["--temperature", "warm"],
    ],
)
def test_malformed_command_line_exits_2(capsys, extra):
    with pytest.raises(SystemExit) as exit_info:
        main([*BASE, *extra])
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    # One sentence naming the option, not the whole usage text.
    assert len(err.strip().splitlines()) == 1, err
    assert "usage:" not in err
    assert err.startswith("spatline carbonate: ") and extra[0] in err


def test_what_if_dose_beyond_limits_is_flagged(capsys):
    assert main([*BASE, "--tank-temperature", "25", "--dose", "sodium_carbonate:200"]) == 0
    out = capsys.readouterr().out
    assert "beyond the limits dose advice keeps to" in out
