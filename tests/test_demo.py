"""The committed demo files are current, invented-data labelled, and the demo command works."""

from __future__ import annotations

from pathlib import Path

from sheetnet.demo import INVENTED_NOTE, demo_csv_text
from tests.bookcheck import cached_values, formula_cells, mismatches

DEMO = Path(__file__).resolve().parents[1] / "workbooks_demo"


def test_demo_data_is_current_and_labelled_invented():
    text = (DEMO / "invented_kiln_firings.csv").read_text(encoding="utf-8")
    assert text == demo_csv_text()
    assert text.startswith(f"# {INVENTED_NOTE}") and "INVENTED" in INVENTED_NOTE
    assert "invented" in (DEMO / "README.md").read_text().lower()


def test_demo_command_rebuilds_the_committed_workbook(tmp_path, run_cli):
    code, out, err = run_cli("demo", "--out", tmp_path, "--quiet")
    assert code == 0, err
    assert str(tmp_path / "kiln_demo.xlsx") in out and "verdict: OK" in out
    fresh, committed = tmp_path / "kiln_demo.xlsx", DEMO / "kiln_demo.xlsx"
    assert formula_cells(fresh) == formula_cells(committed), "run: python workbooks_demo/regenerate.py"
    fresh_values = cached_values(fresh)
    assert not mismatches(cached_values(committed), fresh_values, fresh_values.keys(), tol=1e-12)
    guide = cached_values(fresh)
    assert any(isinstance(v, str) and "INVENTED DATA" in v for v in guide.values())
