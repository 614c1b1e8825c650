"""Published clinical low-flow studies as case records: each names its source and how its
numbers were obtained, they span the agents and N2O the measured-cases work asks for, and
docs/validation.md's study tables are regenerated from them."""

from pathlib import Path

from circlesim.cases.record import load_cases
from circlesim.published.document import studies_section

ROOT = Path(__file__).resolve().parents[1]
FOLDER = ROOT / "scenarios" / "cases" / "published"


def test_records_name_their_sources():
    records, problems = load_cases(FOLDER)
    assert not problems
    for record in records:
        assert record.source and record.provenance, record.name
        # every value of these records was read in an abstract, or derived and said so
        assert "abstract" in record.provenance or "memory" in record.provenance, record.name
        text = record.path.read_text(encoding="utf-8")
        assert "Source:" in text or "source =" in text


def test_records_cover_six_studies_three_agents_and_nitrous_oxide():
    records, _ = load_cases(FOLDER)
    studies = {r.source.split(".")[0] for r in records}
    agents = {r.agent for r in records}
    with_n2o = {r.source.split(".")[0] for r in records
                if any((s.n2o_l_min or 0.0) > 0.0 for s in r.plan.steps)}
    assert len(studies) >= 6 and len(agents) >= 3 and len(with_n2o) >= 2


def test_validation_document_study_tables_are_current():
    # Regenerate with `make validation` when the model or the records change.
    doc = (ROOT / "docs" / "validation.md").read_text(encoding="utf-8")
    assert studies_section(FOLDER) in doc
