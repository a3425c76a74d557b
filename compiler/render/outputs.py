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
from typing import Iterable

from .. import __version__
from ..errors import InputError, Finding
from .manifest import manifest
from .tidy import datapackage, write_datapackage, write_csv, write_factors_csv
from .workbook import write_workbook

MARKER = ".histosol-output"
MARKER_TEXT = "written by histosol; safe to replace with a new compile"
# What versions without a listing in their marker wrote (a compile's or a scenario run's folder).
KNOWN_OUTPUTS = frozenset({
    "emissions.csv", "factors.csv", "gap_filling.csv", "datapackage.json", "inventory.xlsx", "report.html",
    "report.pdf", "report-archive.pdf", "manifest.json", MARKER, "scenario_climate.csv", "scenario_emissions.csv",
    "scenario_areas.csv", "scenarios.xlsx", "scenario-report.html", "scenario-report.pdf"})


def write_outputs(result, out_dir: Path, report: bool = True, archive: bool = False,
                  parallel: bool | None = None, progress=None) -> Path:
    """Every output of a compile, written atomically into ``out_dir``.

    ``progress`` (see :mod:`compiler.progress`) is told as the workbook and the report begin.

    ``parallel`` (default: where the system can fork and no other Python thread runs) lays out the
    report in a forked process on the second core while this one writes the tables; the files are
    the same either way. An archive needs the report's layout in this process, so it is serial.
    """

    def fill(tmp: Path) -> None:
        from ..methods_chapter import write_chapter
        from ..schema import EXPORT_COLUMNS
        from .submission import write_csvs

        job = ReportJob.start(result, tmp, progress) if report and not archive and _can_fork(parallel) else None
        try:
            write_csv(result.emissions, tmp / "emissions.csv", EXPORT_COLUMNS)
            write_factors_csv(result.factors_used, tmp / "factors.csv")
            write_csv(result.gap_fills, tmp / "gap_filling.csv")
            package = datapackage(result.settings.name, EXPORT_COLUMNS, __version__)
            package["resources"].extend(write_csvs(result, tmp))  # the submission tables
            write_chapter(result, tmp)  # methods_chapter.md and .docx
            write_datapackage(package, tmp / "datapackage.json")
            write_workbook(result, tmp / "inventory.xlsx", progress)
        except BaseException:
            if job is not None:
                job.cancel()
            raise
        document = None  # the report's layout, which the archive reuses
        if job is not None:
            job.finish()
        elif archive:
            from .report import layout_report

            document, _ = layout_report(result, tmp, progress)
        elif report:
            from .report import write_report

            write_report(result, tmp, progress)
        files = sorted(p.name for p in tmp.iterdir())
        (tmp / "manifest.json").write_text(json.dumps(manifest(result, tmp, files), indent=2) + "\n",
                                           encoding="utf-8")
        if archive:  # after the manifest, which it carries inside
            from .report import write_archive

            write_archive(result, tmp, document, progress)

    return atomic_folder(Path(out_dir), fill, inputs=input_files(result.settings))


def input_files(settings) -> list[Path]:
    """The settings file and every input it names: what no output folder may replace."""
    return [settings.source, *settings.input_paths().values()]


def _can_fork(parallel: bool | None) -> bool:
    if parallel is False or "fork" not in multiprocessing.get_all_start_methods():
        return False
    return parallel is True or threading.active_count() == 1


class ReportJob:
    """The report (HTML and PDF) written by a forked copy of this process; :meth:`finish` waits for it."""

    def __init__(self, process, connection, progress=None):
        self.process, self.connection, self.progress = process, connection, progress

    @classmethod
    def start(cls, result, folder: Path, progress=None) -> "ReportJob":
        context = multiprocessing.get_context("fork")
        # Buffered text would be written twice, once by the child: flushed here, not left to multiprocessing.
        sys.stdout.flush()
        sys.stderr.flush()
        receive, send = context.Pipe(duplex=False)
        process = context.Process(target=_report_child, args=(result, folder, send, os.getpid()),
                                  daemon=True)
        process.start()
        send.close()
        return cls(process, receive, progress)

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


def _end_with_parent(parent: int) -> None:
    """Make this forked process end when its parent does, even when the parent is killed (SIGKILL).

    On Linux the kernel sends SIGKILL on the parent's death (prctl PR_SET_PDEATHSIG); elsewhere a
    daemon thread checks every half second whether the parent is still there.
    """
    import signal

    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        if libc.prctl(1, signal.SIGKILL, 0, 0, 0) == 0:  # 1 = PR_SET_PDEATHSIG
            if os.getppid() != parent:  # the parent died before the request took effect
                os._exit(1)
            return
    except (OSError, AttributeError):
        pass

    def watch() -> None:
        import time

        while os.getppid() == parent:
            time.sleep(0.5)
        os._exit(1)

    threading.Thread(target=watch, daemon=True).start()


def _report_child(result, folder: Path, connection, parent: int | None = None) -> None:
    import traceback

    from .report import write_report

    if parent is not None:
        _end_with_parent(parent)
    try:
        write_report(result, folder)  # without progress: the parent shows it
        connection.send(("ok", None, ""))
    except BaseException as exc:  # sent to the parent, which raises it there with this traceback as its cause
        text = "".join(traceback.format_exception(exc))
        try:
            connection.send(("error", exc, text))
        except Exception:  # an exception that cannot be pickled: its text
            connection.send(("text", f"{type(exc).__name__}: {exc}", text))
    finally:
        connection.close()


def atomic_folder(out_dir: Path, fill, inputs: Iterable[Path] = ()) -> Path:
    """Run ``fill(tmp)`` on a temporary folder beside ``out_dir``, then put it in place in one rename.

    An existing folder is replaced only when ``fill`` has finished, only if this tool wrote it, and only
    if it still holds exactly what the tool wrote (the listing in its marker file): a file the user added
    or changed there is never deleted. ``out_dir`` may not be, contain, or sit above any of ``inputs`` (the
    settings file and every input it names) nor the settings folder. A lock file beside the folder
    (``.OUT.lock``) keeps two compiles from writing the same folder at once. If ``fill`` fails, the
    temporary folder is removed and ``out_dir`` is untouched. Every refusal is an :class:`InputError`
    (exit code 2) naming the path and the reason.
    """
    out_dir = Path(os.path.abspath(out_dir))
    _refuse_input_folders(out_dir, inputs)
    parent = _existing_parent(out_dir)
    with _OutputLock(out_dir):
        _restore_interrupted_swap(out_dir)
        _check_replaceable(out_dir)
        tmp = None
        try:
            parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.tmp-", dir=out_dir.parent))
            os.chmod(tmp, 0o755)
        except OSError as exc:
            if tmp is not None:
                shutil.rmtree(tmp, ignore_errors=True)
            raise _path_error(out_dir.parent, "the output folder cannot be created there", exc) from None
        try:
            fill(tmp)
            _write_marker(tmp)
            _swap(tmp, out_dir)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
    return out_dir


def _path_error(path: Path, what: str, exc: OSError | None = None, hint: str = "") -> InputError:
    reason = f" ({exc.strerror or exc})" if exc is not None else ""
    return InputError([Finding("error", "output", f"{what}{reason}{'; ' + hint if hint else ''}", file=str(path))])


def _existing_parent(out_dir: Path) -> Path:
    """The output's parent folder; refuse a path that runs through a file or an unwritable folder."""
    for ancestor in [out_dir, *out_dir.parents]:
        if ancestor.exists():
            if ancestor != out_dir and not ancestor.is_dir():
                raise _path_error(ancestor, "the output path runs through a file, which is not a folder",
                                  hint="choose another --out")
            break
    else:  # pragma: no cover - the root exists
        ancestor = out_dir.parent
    if out_dir.exists() and not out_dir.is_dir():
        raise _path_error(out_dir, "output path exists and is not a folder", hint="choose another --out")
    writable = out_dir.parent if out_dir.parent.exists() else ancestor
    if not os.access(writable, os.W_OK | os.X_OK):
        raise _path_error(writable, "the folder that would hold the output is not writable",
                          hint="choose another --out or ask for write access")
    return out_dir.parent


def _refuse_input_folders(out_dir: Path, inputs: Iterable[Path]) -> None:
    """The output folder is replaced as a whole: it may not be, hold or sit above an input or the settings folder."""
    target = Path(os.path.realpath(out_dir))
    for given in inputs:
        if given is None:
            continue
        path = Path(os.path.realpath(given))
        folders = {path} | ({path.parent} if path.name.endswith(".toml") else set())
        for guarded in folders:
            if guarded == target or target in guarded.parents:
                what = "the settings folder" if guarded != path else "an input file"
                raise InputError([Finding(
                    "error", "output", f"the output folder is, holds or sits above {what} ({path}); a new "
                    "compile replaces the output folder as a whole, so it would delete it; choose an --out "
                    "outside the inputs, e.g. a new folder beside the settings file", file=str(out_dir))])


def _check_replaceable(out_dir: Path) -> None:
    """Refuse to replace a folder that this tool did not write, or that holds files it did not write."""
    if not out_dir.is_dir():
        return
    try:
        entries = any(out_dir.iterdir())
    except OSError as exc:
        raise _path_error(out_dir, "the existing output folder cannot be read", exc) from None
    if not entries:
        return
    if not (out_dir / MARKER).is_file():
        raise InputError([Finding("error", "output", "output folder exists, is not empty and was not written by "
                                  "this tool; choose another --out or empty it", file=str(out_dir))])
    foreign = _foreign_files(out_dir)
    if foreign:
        shown = ", ".join(foreign[:10]) + (f" and {len(foreign) - 10} more" if len(foreign) > 10 else "")
        raise InputError([Finding(
            "error", "output", f"the output folder holds files this tool did not write, or that were changed "
            f"since it wrote them ({shown}); a new compile would delete them. Move them out of the folder, or "
            "choose another --out", file=str(out_dir))])


def _listing(folder: Path) -> dict[str, str]:
    """Every file below ``folder`` (relative path) with its size and modification time, as marker lines."""
    out = {}
    for root, dirs, files in os.walk(folder):
        dirs.sort()
        for name in sorted(files):
            path = Path(root) / name
            rel = path.relative_to(folder).as_posix()
            if rel == MARKER:
                continue
            stat = path.lstat()
            out[rel] = f"{stat.st_size} {stat.st_mtime_ns}"
    return out


def _write_marker(folder: Path) -> None:
    lines = [MARKER_TEXT, "# every file written, with its size and modification time (ns): a file that is not",
             "# listed, or differs, is the user's and blocks the next compile into this folder"]
    lines += [f"{stamp} {rel}" for rel, stamp in _listing(folder).items()]
    (folder / MARKER).write_text("\n".join(lines) + "\n", encoding="utf-8")


def _read_marker(folder: Path) -> dict[str, str] | None:
    """The listing a marker holds, or ``None`` for a marker without one."""
    try:
        text = (folder / MARKER).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        return {}
    listing = {}
    for line in text.splitlines()[1:]:
        if line.startswith("#") or not line.strip():
            continue
        size, mtime, rel = (line.split(" ", 2) + ["", ""])[:3]
        listing[rel] = f"{size} {mtime}"
    return listing if listing or len(text.splitlines()) > 1 else None


def _foreign_files(folder: Path) -> list[str]:
    """Files (relative paths) below an output folder that its marker does not list as written by the tool."""
    listing = _read_marker(folder)
    found = _listing(folder)
    if listing is None:  # a marker of an earlier version, without a listing: only the names it wrote
        sub_markers = {rel.rsplit("/", 1)[0] for rel in found if rel.endswith("/" + MARKER)}
        return sorted(rel for rel in found
                      if not (("/" not in rel and rel in KNOWN_OUTPUTS)
                              or (rel.split("/", 1)[0] in sub_markers and rel.split("/", 1)[1] in KNOWN_OUTPUTS)))
    foreign = []
    nested = {}
    for rel in found:  # a subfolder with a marker of its own (scenarios written into a compile's folder)
        parts = rel.split("/")
        for depth in range(1, len(parts)):
            sub = "/".join(parts[:depth])
            if (folder / sub / MARKER).is_file():
                nested.setdefault(sub, None)
                break
    for sub in nested:
        foreign += [f"{sub}/{rel}" for rel in _foreign_files(folder / sub)]
    for rel, stamp in found.items():
        if any(rel.startswith(sub + "/") for sub in nested):
            continue
        if listing.get(rel) != stamp:
            foreign.append(rel)
    return sorted(foreign)


class _OutputLock:
    """An exclusive lock on ``.OUT.lock`` beside the output folder, held while the folder is written.

    A second run into the same folder is refused at once (exit code 2) rather than left waiting. The
    lock file is removed while still held; a run that opened it just before is detected by comparing
    the file it locked with the file at the path, and refused the same way.
    """

    def __init__(self, out_dir: Path):
        self.out_dir = out_dir
        self.path = out_dir.with_name(f".{out_dir.name}.lock")
        self.handle = None

    def _busy(self) -> InputError:
        return InputError([Finding(
            "error", "output", f"another run is writing this output folder now (it holds {self.path.name} "
            "beside it); wait for it to finish or choose another --out", file=str(self.out_dir))])

    def __enter__(self):
        try:
            import fcntl
        except ImportError:  # pragma: no cover - no advisory locks on this system: nothing to hold
            return self
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            handle = open(self.path, "a+")
        except OSError as exc:
            raise _path_error(self.path, "the lock file beside the output folder cannot be created", exc) from None
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
            same = os.path.exists(self.path) and os.path.samestat(os.fstat(handle.fileno()), os.stat(self.path))
        except OSError:
            same = False
        if not same:  # held by another run, or removed by it after we opened it
            handle.close()
            raise self._busy()
        self.handle = handle
        return self

    def __exit__(self, *exc) -> None:
        if self.handle is not None:
            try:
                os.unlink(self.path)  # still held: a run that opens the old file sees it is gone
            except OSError:
                pass
            self.handle.close()


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
    try:
        os.rename(out_dir, old)
    except OSError as exc:
        raise _path_error(out_dir, "the existing output folder cannot be moved aside to be replaced", exc,
                          "close any program that has a file of it open, or choose another --out") from None
    try:
        os.rename(tmp, out_dir)
    except BaseException:
        os.rename(old, out_dir)
        raise
    shutil.rmtree(old, ignore_errors=True)
