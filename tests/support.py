"""Test support: tiny valid datasets written to tmp folders, hashing, a CLI runner.

Imported by tests as ``from support import ...`` (pytest puts tests/ on the path)."""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_tables" / "synthetic_cyclers"

OBS_HEADER = "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis,inputs,proxy_taxon,temperature_c"
VALID_ROWS = [
    "o1,Apis mellifera,body_mass,100,mg,,,,s1,Table 1,reported,,,",
    "o2,Apis mellifera,fiber_radius,12,um,1,sd,10,s1,Table 2,reported,,,",
    "o3,Apis mellifera,frequency_observed,230,Hz,10,sd,5,s2,Fig. 2,digitized,,,30",
    "o4,Bombus terrestris,body_mass,0.2,g,,,,s2,Table 1,reported,,,",
    "o5,Bombus terrestris,attach_rate,120,1/s,,,,s2,p. 4,reported,,,25",
    "o6,Bombus terrestris,kinetic_time,5,ms,,,,s2,p. 4,computed,o5,,25",
]
SOURCES = "source_id,citation,year,doi\ns1,Invented A. (2001) Test source one,2001,10.1000/abc\ns2,Invented B. (2002) Test source two,2002,\n"


def write_dataset(folder: Path, rows: list[str] | None = None, header: str = OBS_HEADER, sources: str = SOURCES, name: str = "observations.csv") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(header + "\n" + "\n".join(VALID_ROWS if rows is None else rows) + "\n", encoding="utf-8")
    (folder / "sources.csv").write_text(sources, encoding="utf-8")
    return folder


def tree_hash(folder: Path) -> str:
    """SHA-256 over every file's relative path and bytes (inputs-unchanged checks)."""
    h = hashlib.sha256()
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            h.update(str(p.relative_to(folder)).encode())
            h.update(p.read_bytes())
    return h.hexdigest()


def run_cli(*args: str, timeout: float = 60) -> subprocess.CompletedProcess:
    """Run ``python -m comparo ARGS`` in a subprocess (as a user would)."""
    return subprocess.run([sys.executable, "-m", "comparo", *args], capture_output=True, text=True, timeout=timeout)
