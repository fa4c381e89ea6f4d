"""The README's examples work as written."""

from __future__ import annotations

import re

import pandas as pd

from conftest import ROOT

README = (ROOT / "README.md").read_text(encoding="utf-8")


def _block(after: str, language: str) -> str:
    start = README.index(after)
    match = re.search(rf"```{language}\n(.*?)```", README[start:], re.S)
    assert match, after
    return match.group(1)


def test_readme_commands_match_ci():
    ci = (ROOT / ".ci" / "run").read_text()
    test_command = _block("Install the test extra", "bash").strip()
    assert test_command in ci
    assert _block("Install and run the whole job", "bash").strip().endswith("vinstrata run")


def test_minimal_config_of_the_readme_reads_its_table(tmp_path, run_cli):
    (tmp_path / "my.toml").write_text(_block("A minimal config", "toml"), encoding="utf-8")
    rows = [{"Lot": f"L{i:03d}", "Score": 84 + i % 9, "pH": 3.2 + 0.01 * (i % 30),
             "TA (g/L H2SO4)": 3.5 + 0.02 * (i % 25), "Alc": 12 + 0.05 * (i % 40)}
            for i in range(60)]
    pd.DataFrame(rows).to_csv(tmp_path / "lots.csv", index=False)
    result = run_cli("check", tmp_path / "lots.csv", "--config", tmp_path / "my.toml",
                     "--out", tmp_path / "check")
    assert result.code == 0, result
    analytes = pd.read_csv(tmp_path / "check" / "quality_analytes.csv").set_index("analyte")
    # acidity written as sulfuric acid comes out as tartaric (x 1.5303, IUPAC molar masses)
    assert analytes.loc["TA", "unit"] == "g/L tartaric"
    assert analytes.loc["TA", "factor"] > 1.53


def test_python_example_of_the_readme_runs(tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    code = _block("The same steps from Python", "python")
    code = code.replace('"briefing.pdf"', repr(str(tmp_path / "briefing.pdf")))
    exec(compile(code, "README example", "exec"), {})
    assert (tmp_path / "briefing.pdf").stat().st_size > 10_000
