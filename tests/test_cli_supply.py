"""The ``edopt supply`` command: operating point, figures, tables, JSON and bad ranges."""

import json
from pathlib import Path

import pytest

from edopt.cli import main

CASES = Path(__file__).resolve().parent.parent / "cases"


def test_supply_writes_figures_and_tables(tmp_path, capsys):
    out = tmp_path / "s"
    rc = main(["supply", str(CASES / "decoder.toml"), "--target", "1.2x", "--supplies",
               "0.6:1.0:0.1", "--flavours", "standard,high", "--points", "4", "--quiet",
               "--out", str(out)])
    assert rc == 0
    text = capsys.readouterr().out
    assert "supply" in text and "circuit simulation" in text
    for stem in ("envelope", "energy_split", "energy_vs_supply"):
        for ext in ("png", "svg"):
            assert (out / f"{stem}.{ext}").stat().st_size > 0
    assert (out / "voltage_frontier.csv").read_text().count("\n") == 5 * 2 * 4 + 1


def test_supply_json_is_the_only_stdout(tmp_path, capsys):
    rc = main(["supply", str(CASES / "decoder.toml"), "--throughput", "5e9", "--supplies",
               "0.7,0.9,1.1", "--points", "3", "--json", "--out", str(tmp_path)])
    assert rc == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["mode"] == "throughput" and doc["cycle_ps"] == pytest.approx(200.0)
    assert doc["delay_ps"] <= 200.0 * (1 + 1e-6)
    assert set(doc["sensitivities_fj_per_ps"]) == {"sizing", "supply", "threshold"}


@pytest.mark.parametrize("extra, match", [
    (["--supplies", "0.2:0.4:0.1"], "below the threshold"),
    (["--supplies", "1.0:0.5:0.1"], "empty"),
    (["--flavours", "ultra"], "no threshold flavour"),
    (["--supplies", "a:b:c"], "cannot read the supply range"),
])
def test_supply_bad_ranges(extra, match, capsys, tmp_path):
    rc = main(["supply", str(CASES / "decoder.toml"), "--quiet", "--out", str(tmp_path), *extra])
    err = capsys.readouterr().err
    assert rc == 2 and match in err and "Traceback" not in err
