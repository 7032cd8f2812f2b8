"""Hostile taxa tables: synonym chains and cycles tens of thousands of links long. Following
them is linear (20,000 links once took 34 s), their messages stay short, and the answer is
that of a plain walk along the links."""

from __future__ import annotations

import random
import time

import pandas as pd
import pytest
from hostile_checks import refused, snapshot
from support import run_main, write_dataset

from comparo.reading.tables import RawTable
from comparo.validation.synonyms import resolve_synonyms


def _table(pairs: list[tuple[str, str]]) -> RawTable:
    frame = pd.DataFrame(pairs, columns=["taxon", "accepted_name"])
    return RawTable("taxa.csv", frame, list(range(2, 2 + len(frame))))


def _walk(pairs: list[tuple[str, str]]) -> dict[str, str]:
    """Reference: from each name follow the links one by one; a walk that meets a name twice
    is in or leads into a cycle and stays unmapped (the rule of docs/data-format.md)."""
    step: dict[str, str] = {}
    for t, a in pairs:
        if t and a and a != t:
            step.setdefault(t, a)
    out = {}
    for start in step:
        seen, x = {start}, start
        while x in step:
            x = step[x]
            if x in seen:
                break
            seen.add(x)
        else:
            out[start] = x
    return out


@pytest.mark.parametrize("seed", range(6))
def test_random_links_resolve_as_a_plain_walk(seed):
    rng = random.Random(seed)
    names = [f"T{i}" for i in range(300)]
    pairs = [(t, rng.choice(names + [""] * 60)) for t in rng.sample(names, 250)]
    resolved, probs = resolve_synonyms(_table(pairs))
    assert resolved == _walk(pairs)
    cycles = [p for p in probs if p.rule == "synonym-cycle"]
    assert all(p.severity == "error" for p in cycles)


@pytest.mark.parametrize("kind", ["chain", "cycle"])
def test_20000_links_take_well_under_a_second(kind):
    n = 20_000
    pairs = [
        (f"Genus n{i}", f"Genus n{(i + 1) % n if kind == 'cycle' else i + 1}") for i in range(n)
    ]
    t0 = time.perf_counter()
    resolved, probs = resolve_synonyms(_table(pairs))
    assert time.perf_counter() - t0 < 2.0
    if kind == "chain":
        assert len(resolved) == n and set(resolved.values()) == {f"Genus n{n}"}
        (p,) = probs
        assert (
            p.rule == "synonym-chain"
            and f"({n + 1 - 9} more)" in p.message
            and len(p.message) < 600
        )
    else:
        assert resolved == {}
        (p,) = probs
        assert p.rule == "synonym-cycle" and f"({n} rows)" in p.message and len(p.message) < 600


def test_a_long_cycle_through_the_cli(tmp_path):
    ds = write_dataset(tmp_path / "DS")
    n = 20_000
    lines = ["taxon,accepted_name", "Apis mellifera,Genus n0"] + [
        f"Genus n{i},Genus n{(i + 1) % n}" for i in range(n)
    ]
    (ds / "taxa.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    t0 = time.perf_counter()
    said = refused(tmp_path, ["table", "{tmp}/DS"], "synonym-cycle", "(19994 more)")
    assert time.perf_counter() - t0 < 30 and len(said) < 5000


def test_a_long_chain_through_the_cli_is_read(tmp_path):
    ds = write_dataset(tmp_path / "DS")
    n = 20_000
    lines = ["taxon,accepted_name", "Apis mellifera,Genus n0"] + [
        f"Genus n{i},Genus n{i + 1}" for i in range(n)
    ]
    (ds / "taxa.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    before = snapshot(tmp_path)
    proc = run_main("table", str(ds))
    assert proc.returncode == 0, proc.stderr[-1000:]
    assert f"Genus n{n}" in proc.stdout
    assert snapshot(tmp_path) == before
