"""``comparo import`` carries a Q10 column and the two temperature columns of taxa.csv
(thermoregulation, operating_temperature_c), by header and by the map file."""

from __future__ import annotations

import pandas as pd
import pytest
from support import run_main

from comparo.curation.harmonise import harmonise
from comparo.validation.dataset import load

WIDE = (
    "Species,Clade,Thermoregulation,Operating temperature (°C),Body mass (g),"
    "Wingbeat frequency (Hz),Temperature (°C),Preparation,{q10},Source,Locator\n"
    "Columba livia,Aves,endotherm,40,400,7,40,in_vivo,,s1,Table 1\n"
    "Locusta migratoria,Orthoptera,ectotherm,30,2,20,35,in_vivo,1.8,s1,Table 2\n"
)
SOURCES = "source_id,citation,year\ns1,Invented (2020) a made-up source,2020\n"


@pytest.mark.parametrize("header, mapped", [("Q10", False), ("Q-ten", True)])
def test_import_maps_q10_and_the_taxa_temperature_columns(tmp_path, header, mapped):
    """The Q10 lands on the rate's row only (not on body mass); the imported dataset is
    then normalised by it: 20 Hz at 35 °C -> 25 °C with Q10 1.8 is 20 * 1.8^((25 - 35)/10)
    by the standard Q10 rule (common practice); the endotherm's in-vivo value is kept."""
    (tmp_path / "wide.csv").write_text(WIDE.format(q10=header), encoding="utf-8")
    (tmp_path / "src.csv").write_text(SOURCES, encoding="utf-8")
    args = [
        "import",
        str(tmp_path / "wide.csv"),
        "-o",
        str(tmp_path / "ds"),
        "--sources",
        str(tmp_path / "src.csv"),
    ]
    if mapped:
        (tmp_path / "map.csv").write_text(
            f"header,role,key,unit,basis\n{header},column,q10,,\n", encoding="utf-8"
        )
        args += ["--map", str(tmp_path / "map.csv")]
    out = run_main(*args)
    assert out.returncode == 0, out.stderr
    assert "q10-unused" not in out.stderr
    taxa = pd.read_csv(tmp_path / "ds" / "taxa.csv")
    assert list(taxa["thermoregulation"]) == ["endotherm", "ectotherm"]
    assert list(taxa["operating_temperature_c"]) == [40, 30]
    obs = pd.read_csv(tmp_path / "ds" / "observations.csv").set_index(["taxon", "quantity"])
    assert obs.loc[("Locusta migratoria", "frequency_observed"), "q10"] == 1.8
    assert pd.isna(obs.loc[("Locusta migratoria", "body_mass"), "q10"])
    rows = harmonise(load(tmp_path / "ds")).rows.set_index(["taxon", "quantity"])
    assert rows.loc[("Locusta migratoria", "frequency_observed"), "value_h"] == pytest.approx(
        20 * 1.8**-1.0
    )
    assert rows.loc[("Columba livia", "frequency_observed"), "value_h"] == 7.0
