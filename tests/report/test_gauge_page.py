"""The gauge study's PDF page: its tables, verdict, caution and vector charts, read back with pypdf."""

import numpy as np
import pytest

from surfinspect.qualify.gauge import gauge_rr
from surfinspect.report.gauge_page import write_gauge_pdf
from surfinspect.results import CAUTION

# the hand-worked table of tests/qualify/test_gauge.py: 3 parts x 2 appraisers x 2 trials at cell mean -/+ 0.5
_CELL_MEANS = np.array([[2, 4], [6, 6], [10, 14]], dtype=float)
INTERACTION_TABLE = np.stack([_CELL_MEANS - 0.5, _CELL_MEANS + 0.5], axis=2)


def test_gauge_pdf_page_holds_tables_verdict_caution_and_vector_charts(tmp_path):
    pypdf = pytest.importorskip("pypdf")
    study = gauge_rr(INTERACTION_TABLE, tolerance=30.0, source="study.csv")
    out = tmp_path / "gauge.pdf"
    write_gauge_pdf(study, out)
    reader = pypdf.PdfReader(str(out))
    assert len(reader.pages) == 1
    text = reader.pages[0].extract_text()
    for expected in (
        "ANOVA, with interaction",
        "Variance components",
        "Gauge not acceptable",
        "Range of trials by appraiser",
        "Means by part and appraiser",
        "part x appraiser",
    ):
        assert expected in text
    assert " ".join(CAUTION.split()[:6]) in " ".join(text.split())
    assert len(reader.pages[0].images) == 0  # charts are vector graphics, not pictures
    assert not list(tmp_path.glob("*.part"))


def test_gauge_pdf_is_archival_and_the_same_bytes_for_the_same_study_and_time(tmp_path):
    from datetime import datetime, timezone

    from pdfa_checks import assert_pdfa_2b

    study = gauge_rr(INTERACTION_TABLE, tolerance=30.0, source="study.csv")
    when = datetime(2031, 4, 2, 9, 0, tzinfo=timezone.utc)
    first, second = tmp_path / "a.pdf", tmp_path / "b.pdf"
    write_gauge_pdf(study, first, generated_at=when)
    write_gauge_pdf(study, second, generated_at=when)
    assert first.read_bytes() == second.read_bytes()
    assert_pdfa_2b(first.read_bytes())
    assert "2031-04-02 09:00 UTC" in pytest.importorskip("pypdf").PdfReader(str(first)).pages[0].extract_text()
