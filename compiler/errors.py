"""Error types and input findings.

One base class, :class:`CompilerError`; each subclass also inherits the
matching builtin so callers may catch either. Every error that concerns a
user's file carries its location (file, sheet, row, column) and what was
expected and found, and renders it in one line per problem.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable

SEVERITIES = ("error", "warning", "info")
MAX_LISTED = 10  # rows listed per problem before "and N more"


@dataclass(frozen=True)
class Finding:
    """One problem or remark about the inputs or the results.

    ``severity`` is ``error`` (blocks the compile), ``warning`` or ``info``.
    ``row`` is the 1-based line number in the file as a spreadsheet shows it
    (the header is row 1), or ``None`` where the finding concerns no single row.
    """

    severity: str
    check: str
    message: str
    file: str = ""
    sheet: str = ""
    row: int | None = None
    column: str = ""
    found: str = ""
    expected: str = ""
    # What the finding is about, as data (a renderer or a later stage reads these, never the message text):
    # the reporting category, the gas and the inventory years it concerns, where it concerns any.
    category_code: str = ""
    gas: str = ""
    years: tuple[int, ...] = ()
    # Every input row the finding concerns (``row`` is the first); the text lists the first MAX_LISTED.
    rows: tuple[int, ...] = ()

    @property
    def text(self) -> str:
        """The message, with the rows it concerns listed (what the outputs show)."""
        if not self.rows:
            return self.message
        listed = ", ".join(map(str, self.rows[:MAX_LISTED]))
        more = f" and {len(self.rows) - MAX_LISTED} more" if len(self.rows) > MAX_LISTED else ""
        return f"{self.message} (rows {listed}{more})"

    def location(self, short: bool = False) -> str:
        parts = []
        if self.file:
            parts.append(self.file.replace("\\", "/").rsplit("/", 1)[-1] if short else self.file)
        if self.sheet:
            parts.append(f"sheet {self.sheet}")
        if self.row == 0:  # a record the compiler made (a gap-filled year): no row of the file
            parts.append("filled year, no input row")
        elif self.row is not None:
            parts.append(f"row {self.row}")
        if self.column:
            # A key of the settings file (section.key) is a setting, not a column.
            is_setting = "." in self.column and (not self.file or self.file.endswith(".toml"))
            kind = "option" if self.column.startswith("--") else "setting" if is_setting else "column"
            parts.append(f"{kind} {self.column}")
        return ", ".join(parts)

    def render(self, short: bool = False) -> str:
        """One line: severity, check, location (file name only when ``short``), message, found, expected."""
        text = self.text
        if self.found != "":
            text += f"; found {self.found!r}"
        if self.expected:
            text += f"; expected {self.expected}"
        where = self.location(short)
        return f"{self.severity}: [{self.check}] {where + ': ' if where else ''}{text}"

    def as_record(self) -> dict:
        return {
            "severity": self.severity,
            "check": self.check,
            "file": self.file,
            "sheet": self.sheet,
            "row": self.row,
            "column": self.column,
            "message": self.text,
            "found": self.found,
            "expected": self.expected,
            "category_code": self.category_code,
            "gas": self.gas,
            "years": " ".join(map(str, self.years)),
        }


class CompilerError(Exception):
    """Base class of every error the compiler raises on purpose."""

    exit_code = 1


class InputError(CompilerError, ValueError):
    """Bad input: one or more blocking findings. The CLI exits with 2."""

    exit_code = 2

    def __init__(self, findings: Iterable[Finding] | Finding | str, head: str = ""):
        if isinstance(findings, str):
            findings = [Finding("error", "input", findings)]
        elif isinstance(findings, Finding):
            findings = [findings]
        self.findings = [f for f in findings]
        self.head = head
        super().__init__(self.render())

    def render(self) -> str:
        errors = [f for f in self.findings if f.severity == "error"]
        head = self.head or (f"{len(errors)} blocking problem{'s' if len(errors) != 1 else ''} in the inputs; "
                             "nothing was written.")
        return "\n".join([head] + [f.render() for f in errors])


class QaqcError(CompilerError):
    """QA/QC checks of the results found errors: nothing is written. The CLI exits with 1."""

    exit_code = 1

    def __init__(self, findings):
        self.findings = list(findings)
        errors = [f for f in self.findings if f.severity == "error"]
        super().__init__("\n".join([f"{len(errors)} QA/QC error{'s' if len(errors) != 1 else ''} in the results; "
                                     "nothing was written."] + [f.render() for f in errors]))


class SettingsError(InputError):
    """A problem in the settings file."""


class FactorLookupError(CompilerError, KeyError):
    """A factor that should exist in the shipped tables does not."""

    exit_code = 1

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class ResourceMissing(CompilerError, FileNotFoundError):
    """A data folder that ships with the package was not found."""


@dataclass
class FindingLog:
    """Collects findings while a stage runs, so all problems are reported at once."""

    findings: list[Finding] = field(default_factory=list)
    pending: dict = field(default_factory=dict)  # notes a stage aggregates before adding them
    _seen: set = field(default_factory=set, repr=False, compare=False)  # the findings already in the list
    _synced: int = field(default=0, repr=False, compare=False)  # how many of them are in _seen

    def add(self, severity: str, check: str, message: str, **where) -> None:
        if severity not in SEVERITIES:
            raise ValueError(f"unknown severity {severity!r}")
        finding = Finding(severity, check, message, **where)
        for earlier in self.findings[self._synced:]:  # appended by extend() or by hand since the last add
            self._seen.add(earlier)
        self._synced = len(self.findings)
        if finding not in self._seen:  # two pathways needing one factor report it once (a set: linear overall)
            self._seen.add(finding)
            self.findings.append(finding)
            self._synced += 1

    def extend(self, other: Iterable[Finding]) -> None:
        self.findings.extend(other)

    @property
    def errors(self) -> list[Finding]:
        return [f for f in self.findings if f.severity == "error"]

    def raise_if_errors(self) -> None:
        if self.errors:
            raise InputError(self.findings)


def findings_table(findings: Iterable[Finding]):
    """Findings as a table (``result.findings``, the workbook's findings sheet): the columns of
    :data:`compiler.schema.FINDING_COLUMNS`, ``row`` as a nullable integer."""
    import pandas as pd

    from .schema import FINDING_COLUMNS

    frame = pd.DataFrame([f.as_record() for f in findings] or None, columns=FINDING_COLUMNS)
    frame["row"] = frame["row"].astype("Int64")
    return frame
