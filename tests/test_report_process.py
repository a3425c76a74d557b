"""The report laid out in a forked process: a failure there reaches the parent with the child's traceback."""

from __future__ import annotations

import multiprocessing

import pytest

from compiler.render import outputs, report


@pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(), reason="needs fork")
def test_a_failure_in_the_report_process_carries_its_traceback(tmp_path, demo_result, monkeypatch):
    def broken_layout(result, folder):
        raise ValueError("layout failed")

    monkeypatch.setattr(report, "write_report", broken_layout)
    with pytest.raises(ValueError, match="layout failed") as caught:
        outputs.write_outputs(demo_result, tmp_path / "out", parallel=True)
    cause = caught.value.__cause__
    assert isinstance(cause, outputs.ChildTraceback)
    assert "broken_layout" in str(cause) and "_report_child" in str(cause)
    assert not (tmp_path / "out").exists()
