"""``spatline carbonate``: the carbonate system of one water sample, from the shell.

Solves the sample in situ, optionally carries it to a tank temperature, adds a
dose and finds the dose for a target aragonite saturation. Prints a table, or
JSON with ``--json``. A bad value prints one sentence on stderr and exits with
status 2, as argparse does for a malformed command line. A dose the chemistry
refuses (target too high, pH cap) is an answer, not an error: it is printed
with its reason and the command exits 0.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from typing import Any, NoReturn

import numpy as np

from chemistry import (
    CHEMICALS,
    CHEMISTRY_VERSION,
    DOSING_CAUTION,
    ChemistryInputError,
    at_temperature,
    solve,
)
from chemistry.dosing import (
    MAX_RESULT_OMEGA_ARAGONITE,
    MAX_RESULT_PH_TOTAL,
    DoseRefusedError,
    add_chemical,
    dose_additions,
    dose_for_target,
)

EXIT_BAD_VALUE = 2

# (attribute, label, unit, decimals) of the rows shown in the table.
_ROWS = (
    ("temperature", "temperature", "deg C", 2),
    ("salinity", "salinity", "", 2),
    ("ph_total", "pH (total scale)", "", 3),
    ("ph_nbs", "pH (NBS scale)", "", 3),
    ("alkalinity", "total alkalinity", "umol/kg", 1),
    ("dic", "dissolved inorganic carbon", "umol/kg", 1),
    ("pco2", "pCO2", "uatm", 0),
    ("carbonate", "carbonate ion", "umol/kg", 1),
    ("omega_aragonite", "omega aragonite", "", 2),
    ("omega_calcite", "omega calcite", "", 2),
    ("revelle_factor", "Revelle factor", "", 2),
)


def _dose(text: str) -> tuple[str, float]:
    name, sep, amount = text.partition(":")
    if not sep or name not in CHEMICALS:
        raise argparse.ArgumentTypeError(
            f"--dose must be CHEMICAL:MG_PER_L with CHEMICAL one of {', '.join(CHEMICALS)}; "
            f"got {text!r}"
        )
    try:
        mg_per_l = float(amount)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"--dose amount must be a number of mg/L; got {amount!r}"
        ) from None
    if not (math.isfinite(mg_per_l) and mg_per_l >= 0):
        raise argparse.ArgumentTypeError(f"--dose amount must be 0 mg/L or more; got {amount!r}")
    return name, mg_per_l


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "carbonate",
        help="solve the carbonate system of one water sample",
        description=(
            "Solve the seawater CO2 system from two of pH, alkalinity, DIC and pCO2; "
            "optionally predict it at a tank temperature, after a dose, and find the dose "
            "for a target aragonite saturation."
        ),
    )
    parser.add_argument("--temperature", type=float, required=True, help="deg C")
    parser.add_argument("--salinity", type=float, required=True, help="practical salinity")
    parser.add_argument("--ph", type=float, help="pH on --ph-scale")
    parser.add_argument("--ph-scale", choices=("total", "seawater", "free", "nbs"), default="total")
    parser.add_argument("--alkalinity", type=float, help="total alkalinity, umol/kg")
    parser.add_argument("--dic", type=float, help="dissolved inorganic carbon, umol/kg")
    parser.add_argument("--pco2", type=float, help="pCO2, uatm")
    parser.add_argument(
        "--carbonic",
        choices=("lueker2000", "millero2010"),
        default="lueker2000",
        help="K1, K2 set (millero2010 for estuarine water)",
    )
    parser.add_argument(
        "--tank-temperature", type=float, help="deg C; the water heated or cooled, closed"
    )
    parser.add_argument(
        "--dose", type=_dose, metavar="CHEMICAL:MG_PER_L", help="e.g. sodium_carbonate:10"
    )
    parser.add_argument(
        "--target-omega", type=float, help="target omega aragonite for a dose suggestion"
    )
    parser.add_argument(
        "--target-chemical",
        choices=tuple(CHEMICALS),
        default=None,
        help="chemical for --target-omega (default: that of --dose, else sodium_carbonate)",
    )
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.set_defaults(handler=run)
    parser.error = _one_sentence_error  # type: ignore[method-assign]


def _one_sentence_error(message: str) -> NoReturn:
    """A bad option is one sentence on stderr and exit 2; the usage text buries it."""
    message = message.removeprefix("argument ")
    print(f"spatline carbonate: {message}; see spatline carbonate --help.", file=sys.stderr)
    sys.exit(2)


def _state_dict(state: Any) -> dict[str, Any]:
    return {key: float(np.asarray(value)) for key, value in state.as_dict().items()}


def _over_limits(state: Any) -> str | None:
    """The sentence a what-if dose earns when it passes the limits dose advice keeps to."""
    omega = float(np.asarray(state.omega_aragonite))
    ph_total = float(np.asarray(state.ph_total))
    if omega > MAX_RESULT_OMEGA_ARAGONITE or ph_total > MAX_RESULT_PH_TOTAL:
        return (
            f"This dose gives omega aragonite {omega:.2f} and pH_total {ph_total:.2f}, beyond "
            f"the limits dose advice keeps to (omega {MAX_RESULT_OMEGA_ARAGONITE:g}, "
            f"pH_total {MAX_RESULT_PH_TOTAL:g}): calcium carbonate may precipitate; "
            "use a smaller dose."
        )
    return None


def _compute(args: argparse.Namespace) -> dict[str, Any]:
    in_situ = solve(
        temperature=args.temperature,
        salinity=args.salinity,
        ph=args.ph,
        alkalinity=args.alkalinity,
        dic=args.dic,
        pco2=args.pco2,
        ph_scale=args.ph_scale,
        carbonic=args.carbonic,
    )
    result: dict[str, Any] = {
        "chemistry_version": CHEMISTRY_VERSION,
        "in_situ": in_situ,
        "tank": None,
        "after_dose": None,
        "target": None,
    }
    tank = in_situ
    if args.tank_temperature is not None:
        tank = at_temperature(in_situ, args.tank_temperature)
        result["tank"] = tank
    if args.dose is not None:
        chemical, mg_per_l = args.dose
        alkalinity_added, dic_added = dose_additions(
            chemical, mg_per_l, tank.temperature, tank.salinity
        )
        dosed = add_chemical(tank, chemical, mg_per_l)
        result["after_dose"] = {
            "chemical": chemical,
            "mg_per_l": mg_per_l,
            "grams_per_1000_l": mg_per_l,
            "alkalinity_added": float(alkalinity_added),
            "dic_added": float(dic_added),
            "state": dosed,
            "over_limits": _over_limits(dosed),
        }
    if args.target_omega is not None:
        chemical = args.target_chemical or (args.dose[0] if args.dose else "sodium_carbonate")
        try:
            advice = dose_for_target(
                in_situ, args.target_omega, chemical, temperature=args.tank_temperature
            )
        except DoseRefusedError as refusal:
            result["target"] = {
                "target_omega_aragonite": args.target_omega,
                "chemical": chemical,
                "refused": str(refusal),
            }
        else:
            result["target"] = {
                "target_omega_aragonite": args.target_omega,
                "chemical": advice.chemical,
                "mg_per_l": advice.mg_per_l,
                "grams_per_1000_l": advice.grams_per_1000_l,
                "alkalinity_added": advice.alkalinity_added,
                "dic_added": advice.dic_added,
                "state": advice.state,
            }
    return result


def _warnings(result: dict[str, Any]) -> list[str]:
    states = [result["in_situ"], result["tank"]]
    states += [
        section["state"]
        for section in (result["after_dose"], result["target"])
        if section and "state" in section
    ]
    seen: list[str] = []
    if result["after_dose"] and result["after_dose"]["over_limits"]:
        seen.append(result["after_dose"]["over_limits"])
    for state in states:
        for sentence in getattr(state, "warnings", ()) if state is not None else ():
            if sentence not in seen:
                seen.append(sentence)
    return seen


def _as_json(result: dict[str, Any]) -> str:
    def encode(section: Any) -> Any:
        if section is None:
            return None
        if isinstance(section, dict):
            return {
                key: _state_dict(value) if key == "state" else value
                for key, value in section.items()
            }
        return _state_dict(section)

    payload = {
        "chemistry_version": result["chemistry_version"],
        "in_situ": encode(result["in_situ"]),
        "tank": encode(result["tank"]),
        "after_dose": encode(result["after_dose"]),
        "target": encode(result["target"]),
        "warnings": _warnings(result),
    }
    if result["after_dose"] or result["target"]:
        payload["caution"] = DOSING_CAUTION
    return json.dumps(payload, indent=2)


def _as_table(result: dict[str, Any]) -> str:
    columns: list[tuple[str, Any]] = [("in situ", result["in_situ"])]
    if result["tank"] is not None:
        columns.append((f"tank {float(result['tank'].temperature):g} C", result["tank"]))
    if result["after_dose"] is not None:
        dose = result["after_dose"]
        columns.append((f"+{dose['mg_per_l']:g} mg/L", dose["state"]))
    target = result["target"]
    if target is not None and "state" in target:
        columns.append((f"at target {target['target_omega_aragonite']:g}", target["state"]))

    label_width = max(len(f"{label} ({unit})" if unit else label) for _, label, unit, _ in _ROWS)
    widths = [max(12, len(title)) for title, _ in columns]
    lines = [
        " " * label_width
        + "".join(f"  {title:>{width}}" for (title, _), width in zip(columns, widths, strict=True))
    ]
    for attribute, label, unit, decimals in _ROWS:
        name = f"{label} ({unit})" if unit else label
        cells = "".join(
            f"  {float(np.asarray(getattr(state, attribute))):>{width}.{decimals}f}"
            for (_, state), width in zip(columns, widths, strict=True)
        )
        lines.append(f"{name:<{label_width}}{cells}")

    notes: list[str] = []
    if result["after_dose"] is not None:
        dose = result["after_dose"]
        notes.append(
            f"Dose: {dose['mg_per_l']:g} mg/L {dose['chemical']} "
            f"({dose['grams_per_1000_l']:g} g per 1000 L) adds "
            f"{dose['alkalinity_added']:.1f} umol/kg alkalinity and "
            f"{dose['dic_added']:.1f} umol/kg DIC."
        )
    if target is not None:
        if "refused" in target:
            notes.append(
                f"Dose for omega aragonite {target['target_omega_aragonite']:g}: "
                f"refused. {target['refused']}"
            )
        elif target["mg_per_l"] == 0:
            notes.append(
                f"Dose for omega aragonite {target['target_omega_aragonite']:g}: none needed, "
                "the water is already at or above the target."
            )
        else:
            notes.append(
                f"Dose for omega aragonite {target['target_omega_aragonite']:g}: "
                f"{target['mg_per_l']:.2f} mg/L {target['chemical']} "
                f"({target['grams_per_1000_l']:.2f} g per 1000 L)."
            )
    for sentence in _warnings(result):
        notes.append(f"Warning: {sentence}")
    if result["after_dose"] is not None or target is not None:
        notes.append(f"Caution: {DOSING_CAUTION}")
    notes.append(f"Chemistry version {result['chemistry_version']}.")
    return "\n".join([*lines, "", *notes])


def run(args: argparse.Namespace) -> int:
    """Handler of ``spatline carbonate``; returns the exit status."""
    try:
        result = _compute(args)
    except ChemistryInputError as error:
        print(str(error), file=sys.stderr)
        return EXIT_BAD_VALUE
    print(_as_json(result) if args.json else _as_table(result))
    return 0
