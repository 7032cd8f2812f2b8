"""The settings file of a dataset (``comparo.toml``): parsed, depth-checked, keys in NFC."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.text import decode_bytes, nfc

SETTINGS_NAME = "comparo.toml"

SETTINGS_KEYS = {
    "reference_temperature_c",
    "q10",
    "derive",
    "quantities",
    "ratios",
    "analysis",
    "comparison",
    "impute",
    "aggregate",
    "conflict_factor",
    "temperature_model",
    "activation_energy_kj_mol",
    "title",
    "seed",
    "header_synonyms",
    "temperature",
}


MAX_SETTINGS_DEPTH = 16  # tables and arrays inside one another; comparo's own settings use 3


def nesting(value: Any) -> int:
    """How deeply tables (dicts) and arrays (lists) of parsed TOML sit inside one another
    (0 for a plain value); measured without recursion."""
    depth, stack = 0, [(value, 0)]
    while stack:
        v, d = stack.pop()
        if isinstance(v, dict | list):
            depth = max(depth, d + 1)
            stack.extend((x, d + 1) for x in (v.values() if isinstance(v, dict) else v))
    return depth


def too_deep(file: str) -> Problem:
    """The problem of a TOML file nested beyond :data:`MAX_SETTINGS_DEPTH`."""
    return problem(
        file,
        "toml-depth",
        f"tables or arrays are nested more than {MAX_SETTINGS_DEPTH} levels deep",
        "settings are a few levels deep at most; see docs/data-format.md",
    )


def read_settings(path: Path) -> tuple[dict[str, Any], list[Problem]]:
    """Parse comparo.toml; unknown top-level keys are warnings."""
    file = path.name
    text, probs = decode_bytes(path.read_bytes(), file)
    if text is None:
        return {}, probs
    try:
        settings = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        return {}, probs + [
            problem(
                file,
                "toml-syntax",
                f"cannot parse settings: {exc}",
                "see docs/data-format.md for the settings format",
                row=int(m.group(1)) if m else None,
            )
        ]
    except RecursionError:
        return {}, probs + [too_deep(file)]
    if nesting(settings) > MAX_SETTINGS_DEPTH:
        return {}, probs + [too_deep(file)]
    settings = _nfc_value(settings)
    for key in settings:
        if key not in SETTINGS_KEYS:
            probs.append(
                problem(
                    file,
                    "settings-key",
                    f"unknown setting {key!r} (ignored)",
                    f"known settings: {', '.join(sorted(SETTINGS_KEYS))}",
                    column=key,
                    severity="warning",
                )
            )
    t = settings.get("reference_temperature_c")
    number = isinstance(t, int | float) and not isinstance(t, bool)
    if t is not None and t != "operating" and (not number or not -5 <= t <= 60):
        probs.append(
            problem(
                file,
                "settings-value",
                "reference_temperature_c must be a number of degrees Celsius "
                'between -5 and 60, or "operating" '
                "(each taxon's operating_temperature_c in taxa.csv)",
                column="reference_temperature_c",
                value=str(t),
            )
        )
    return settings, probs


def _nfc_value(v: Any) -> Any:
    """Keys and strings of parsed settings in NFC (numbers and booleans as they are)."""
    if isinstance(v, dict):
        return {nfc(k): _nfc_value(x) for k, x in v.items()}
    if isinstance(v, list):
        return [_nfc_value(x) for x in v]
    return nfc(v) if isinstance(v, str) else v
