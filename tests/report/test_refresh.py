"""`agree` and `power` rebuild the report of the run folder they write into."""

import pytest

from pipeline.report.refresh import refresh_if_run
from report_run import write_run


def test_folder_without_a_run_is_left_alone(tmp_path):
    assert refresh_if_run(tmp_path) == []
    assert not (tmp_path / "report.html").exists()


@pytest.mark.slow
def test_run_folder_gets_its_report_rebuilt(tmp_path):
    out = write_run(tmp_path / "out")
    written = refresh_if_run(out)
    assert (out / "report.html") in written and (out / "deck.pptx").is_file()
