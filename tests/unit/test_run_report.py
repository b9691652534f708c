"""Run reports without the optional plotting extra: the Markdown still comes, with the hint."""

import sys

from aligner.bench import DEMO_BENCH
from aligner.run.log import LoggedPoint, RunRecord
from aligner.run.report import INSTALL_HINT, write_report


def test_report_without_matplotlib_says_how_to_install(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # import fails as if not installed
    record = RunRecord(
        1, "sweep", "complete", "b", None, DEMO_BENCH.read_text(), "list:1", ({}, {}), 1.0, 0.0,
        1, "analyzer", "0", "t0", "t1", "", {}, 2,
    )  # fmt: skip
    points = [
        LoggedPoint(
            i,
            1.0,
            {"analyzer": 136.0},
            {"analyzer": 136.0},
            136.0,
            10,
            None,
            1.0,
            1e-4,
            9e-5,
            1.1e-4,
            1e-4,
            5.0,
            1.0,
            None,
            None,
            "t0",
            "t1",
        )
        for i in range(2)
    ]
    report = write_report(record, points, [], tmp_path)
    assert report.plot is None and report.note == INSTALL_HINT
    text = report.markdown.read_text()
    assert 'pip install "aligner[report]"' in text and "not fitted" in text
    assert "devices not recorded" in text
