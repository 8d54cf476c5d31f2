"""The README's case-file example is a working case (it is the documentation users copy)."""

import re
from pathlib import Path

import edopt
from edopt.formats.case import case_from_toml_text

README = Path(__file__).resolve().parent.parent / "README.md"


def test_readme_case_example_loads_and_sizes():
    block = re.search(r"```toml\n(.*?)```", README.read_text(encoding="utf-8"), re.S).group(1)
    case = case_from_toml_text(block, "README.md")
    assert len(case.circuit.gates) == 3
    res = edopt.size(case.circuit, case.tech, target=case.target)
    assert res.status == "optimal"
    assert res.delay_ps <= res.target_ps * (1 + 1e-6)


def test_readme_mentions_the_caution():
    text = README.read_text(encoding="utf-8")
    assert "first-order" in text and "circuit simulation" in text
