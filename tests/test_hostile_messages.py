"""Messages that must say what the user typed, in plain words, and caches that stay out of
the user's home folder."""

from __future__ import annotations

import os
import subprocess
import sys

from hostile_checks import refused


def test_a_kelvin_temperature_is_shown_as_typed(tmp_path):
    """-5 K is below absolute zero; the message shows the cell as typed (-5, K) and what it
    was read as (-278.15 °C: T/°C = T/K - 273.15, the SI definition of the Celsius scale)."""
    (tmp_path / "wide.csv").write_text(
        "Species,Wingbeat frequency (Hz),Temperature (K),Source\n"
        "Apis mellifera,230,-5,S1\nBombus terrestris,150,300,S1\n",
        encoding="utf-8",
    )
    said = refused(
        tmp_path,
        ["import", "{tmp}/wide.csv", "-o", "{tmp}/out"],
        "temperature-impossible",
        allow=("out-import-map.csv",),
    )
    assert "value '-5'" in said and "(typed -5 K, read as -278.15 °C)" in said
    assert said.count("typed -5 K") == 1  # one cell, one line (it held two long rows' temperature)
    assert "value '-278.15'" not in said


def test_a_celsius_temperature_is_shown_as_typed(tmp_path):
    (tmp_path / "wide.csv").write_text(
        "Species,Wingbeat frequency (Hz),Temperature (°C),Source\nApis mellifera,230,-300,S1\n",
        encoding="utf-8",
    )
    said = refused(
        tmp_path, ["import", "{tmp}/wide.csv", "-o", "{tmp}/out"], "temperature-impossible"
    )
    assert "value '-300'" in said and "typed" not in said


def test_a_point_in_a_decimal_comma_table_reads_as_a_sentence(tmp_path):
    (tmp_path / "wide.csv").write_text(
        "Species;Wingbeat frequency (Hz);Source\nApis mellifera;230.5;S1\n", encoding="utf-8"
    )
    said = refused(
        tmp_path,
        ["import", "{tmp}/wide.csv", "-o", "{tmp}/out", "--decimal-comma"],
        "cell B2 is a number with '.' in a table read with decimal commas",
    )
    assert " is holds " not in said


def _home_after(tmp_path, env_extra: dict[str, str]) -> list[str]:
    home = tmp_path / "home"
    home.mkdir()
    env = {
        k: v
        for k, v in os.environ.items()
        if k not in ("MPLCONFIGDIR", "XDG_CACHE_HOME", "XDG_CONFIG_HOME")
    }
    env.update(HOME=str(home), **env_extra)
    code = (
        "from comparo.report import figures as plots; plots._plt().figure(); import "
        "matplotlib; print(matplotlib.get_cachedir())"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    return sorted(str(p.relative_to(home)) for p in home.rglob("*")), proc.stdout.strip()


def test_matplotlib_cache_goes_to_comparos_cache_folder(tmp_path):
    """With COMPARO_CACHE_DIR set, matplotlib's font cache is written there, not in the home."""
    cache = tmp_path / "cache"
    found, cachedir = _home_after(tmp_path, {"COMPARO_CACHE_DIR": str(cache)})
    assert found == [] and cachedir == str(cache / "matplotlib")
    assert any(p.name.startswith("fontlist") for p in (cache / "matplotlib").iterdir())


def test_no_cache_writes_nothing_under_home(tmp_path):
    """COMPARO_CACHE_DIR="" (no cache): a temporary folder, removed at exit."""
    found, cachedir = _home_after(tmp_path, {"COMPARO_CACHE_DIR": ""})
    assert found == [] and "comparo-matplotlib-" in cachedir and not os.path.exists(cachedir)


def test_a_users_own_matplotlib_folder_is_kept(tmp_path):
    mine = tmp_path / "mine"
    found, cachedir = _home_after(
        tmp_path, {"MPLCONFIGDIR": str(mine), "COMPARO_CACHE_DIR": str(tmp_path / "c")}
    )
    assert cachedir == str(mine) and found == []
