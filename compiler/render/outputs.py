"""Write every output of a compile into a folder, atomically.

Outputs are written into a temporary folder beside the target and moved
into place in one rename when all are complete; an existing output folder is
replaced only then. If anything fails, the previous folder is untouched and
the temporary one removed.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import shutil
import sys
import tempfile
import threading
from pathlib import Path

from .. import __version__
from ..errors import InputError, Finding
from .manifest import manifest
from .tidy import datapackage, write_datapackage, write_csv, write_factors_csv
from .workbook import write_workbook

MARKER = ".histosol-output"


def write_outputs(result, out_dir: Path, report: bool = True, archive: bool = False,
                  parallel: bool | None = None) -> Path:
    """Every output of a compile, written atomically into ``out_dir``.

    ``parallel`` (default: where the system can fork and no other Python thread runs) lays out the
    report in a forked process on the second core while this one writes the tables; the files are
    the same either way. An archive needs the report's layout in this process, so it is serial.
    """

    def fill(tmp: Path) -> None:
        from ..pipeline import EXPORT_COLUMNS

        job = ReportJob.start(result, tmp) if report and not archive and _can_fork(parallel) else None
        try:
            write_csv(result.emissions, tmp / "emissions.csv", EXPORT_COLUMNS)
            write_factors_csv(result.factors_used, tmp / "factors.csv")
            write_csv(result.gap_fills, tmp / "gap_filling.csv")
            write_datapackage(datapackage(result.settings.name, EXPORT_COLUMNS, __version__),
                              tmp / "datapackage.json")
            write_workbook(result, tmp / "inventory.xlsx")
        except BaseException:
            if job is not None:
                job.cancel()
            raise
        if job is not None:
            job.finish()
        elif report or archive:
            from .report import write_report

            write_report(result, tmp)
        files = sorted(p.name for p in tmp.iterdir())
        (tmp / "manifest.json").write_text(json.dumps(manifest(result, tmp, files), indent=2) + "\n",
                                           encoding="utf-8")
        if archive:  # after the manifest, which it carries inside
            from .report import write_archive

            write_archive(result, tmp)

    return atomic_folder(Path(out_dir), fill)


def _can_fork(parallel: bool | None) -> bool:
    if parallel is False or "fork" not in multiprocessing.get_all_start_methods():
        return False
    return parallel is True or threading.active_count() == 1


class ReportJob:
    """The report (HTML and PDF) written by a forked copy of this process; :meth:`finish` waits for it."""

    def __init__(self, process, connection, progress=None):
        self.process, self.connection, self.progress = process, connection, progress

    @classmethod
    def start(cls, result, folder: Path) -> "ReportJob":
        context = multiprocessing.get_context("fork")
        # Buffered text would be written twice, once by the child: flushed here, not left to multiprocessing.
        sys.stdout.flush()
        sys.stderr.flush()
        receive, send = context.Pipe(duplex=False)
        process = context.Process(target=_report_child, args=(result, folder, send), daemon=True)
        process.start()
        send.close()
        return cls(process, receive, getattr(result, "_progress", None))

    def finish(self) -> None:
        """Wait for the report; raise what the child raised (or say how it died).

        The child's formatted traceback rides along as the ``__cause__`` of the exception raised here
        (a :class:`ChildTraceback`), so ``--traceback`` shows where the report failed, not only this re-raise.
        """
        from ..progress import stage

        stage(self.progress, "laying out the report")  # the child draws nothing: this process says it
        try:
            status, payload, child_tb = self.connection.recv()
        except EOFError:
            status, payload, child_tb = "died", None, ""
        finally:
            self.connection.close()
            self.process.join()
        if status == "ok":
            return
        cause = ChildTraceback(child_tb) if child_tb else None
        if status == "error" and isinstance(payload, BaseException):
            raise payload from cause
        raise RuntimeError(f"the report process ended without a result (exit code {self.process.exitcode})"
                           + (f": {payload}" if payload else "")) from cause

    def cancel(self) -> None:
        if self.process.is_alive():
            self.process.terminate()
        self.process.join()
        self.connection.close()


class ChildTraceback(Exception):
    """The formatted traceback of an exception raised in the report process (shown as its cause)."""

    def __str__(self) -> str:
        return "raised in the report process:\n\n" + self.args[0].rstrip("\n")


def _report_child(result, folder: Path, connection) -> None:
    import traceback

    from .report import write_report

    result._progress = None  # progress is shown by the parent only
    try:
        write_report(result, folder)
        connection.send(("ok", None, ""))
    except BaseException as exc:  # sent to the parent, which raises it there with this traceback as its cause
        text = "".join(traceback.format_exception(exc))
        try:
            connection.send(("error", exc, text))
        except Exception:  # an exception that cannot be pickled: its text
            connection.send(("text", f"{type(exc).__name__}: {exc}", text))
    finally:
        connection.close()


def atomic_folder(out_dir: Path, fill) -> Path:
    """Run ``fill(tmp)`` on a temporary folder beside ``out_dir``, then put it in place in one rename.

    An existing folder is replaced only when ``fill`` has finished, and only if this tool wrote it.
    If ``fill`` fails, the temporary folder is removed and ``out_dir`` is untouched.
    """
    out_dir = out_dir.resolve()
    _restore_interrupted_swap(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError([Finding("error", "output", "output path exists and is not a folder", file=str(out_dir))])
    if out_dir.is_dir() and any(out_dir.iterdir()) and not (out_dir / MARKER).exists():
        raise InputError([Finding("error", "output", "output folder exists, is not empty and was not written by "
                                  "this tool; choose another --out or empty it", file=str(out_dir))])
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.tmp-", dir=out_dir.parent))
    os.chmod(tmp, 0o755)
    try:
        fill(tmp)
        (tmp / MARKER).write_text("written by histosol; safe to replace with a new compile\n", encoding="utf-8")
        _swap(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out_dir


def _restore_interrupted_swap(out_dir: Path) -> None:
    """A run killed between the two renames of :func:`_swap` leaves only ``.OUT.old-PID``: put it back."""
    if out_dir.exists():
        return
    olds = sorted(out_dir.parent.glob(f".{out_dir.name}.old-*"))
    for old in olds:
        if (old / MARKER).exists():
            os.rename(old, out_dir)
            return


def _swap(tmp: Path, out_dir: Path) -> None:
    """Put ``tmp`` in place of ``out_dir``; the old folder goes only after the new one is in place."""
    if not out_dir.exists():
        os.rename(tmp, out_dir)
        return
    old = out_dir.with_name(f".{out_dir.name}.old-{os.getpid()}")
    os.rename(out_dir, old)
    try:
        os.rename(tmp, out_dir)
    except BaseException:
        os.rename(old, out_dir)
        raise
    shutil.rmtree(old, ignore_errors=True)
