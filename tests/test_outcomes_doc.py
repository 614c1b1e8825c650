"""docs/outcomes.md is generated from the code; it must match what the generator renders now."""

import runpy
from pathlib import Path

DOCS = Path(__file__).resolve().parents[1] / "docs"


def test_outcomes_page_is_up_to_date():
    render = runpy.run_path(str(DOCS / "make_outcomes_doc.py"))["render"]
    current = (DOCS / "outcomes.md").read_text(encoding="utf-8")
    assert current == render(), ("docs/outcomes.md is out of date: run "
                                 "`.venv/bin/python docs/make_outcomes_doc.py`")
