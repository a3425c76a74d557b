"""Progress: every long step is announced; nothing is drawn when the output is not a terminal."""

from __future__ import annotations

from compiler import compile_inventory
from compiler.progress import Progress
from conftest import stratum, write_inventory


class Recorder:
    def __init__(self):
        self.stages, self.calls = [], 0

    def stage(self, name):
        self.stages.append(name)

    def __call__(self, done, total):
        self.calls += 1


def test_every_long_step_is_announced(tmp_path):
    settings = write_inventory(tmp_path / "inv", [stratum(year=y) for y in (2019, 2020)], first=2019, last=2020)
    recorder = Recorder()
    result = compile_inventory(settings, progress=recorder, iterations=200)
    result.write(tmp_path / "out", parallel=False, progress=recorder)
    assert recorder.stages == ["reading the inputs", "filling gaps in the area series",
                               "computing emissions and removals", "QA/QC checks",
                               "uncertainty (Approach 1, Monte Carlo)", "key categories", "writing the workbook",
                               "laying out the report"]
    assert recorder.calls > 0  # the Monte Carlo's share done


def test_a_plain_callable_still_works_and_nothing_is_drawn_off_a_terminal(tmp_path, capsys):
    settings = write_inventory(tmp_path / "inv", [stratum()])
    seen = []
    compile_inventory(settings, progress=lambda done, total: seen.append(done), iterations=200)
    assert seen
    progress = Progress()  # stdout and stderr are captured here: not terminals
    assert not progress.enabled
    progress.stage("anything")
    progress(1, 2)
    progress.close()
    assert capsys.readouterr() == ("", "")
