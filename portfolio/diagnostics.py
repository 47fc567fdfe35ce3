"""Diagnostics: one class per kind, a registry of stable codes, and a Report.

Finding is separate from reporting: the stages append :class:`Diagnostic`
objects to a :class:`Sink`; only the CLI renders them (see
:mod:`portfolio.render`).  The :class:`Report` owns the exit-code policy.

Codes are stable: never renumber one, never reuse a retired one.  The table in
``docs/diagnostics.md`` is generated from :data:`REGISTRY` and a test checks
that the two agree.
"""

from __future__ import annotations

from dataclasses import FrozenInstanceError, dataclass, field
from typing import ClassVar, Dict, List, Type

from .spans import Span

ERROR = "error"
WARNING = "warning"

REGISTRY: Dict[str, Type["Diagnostic"]] = {}


@dataclass(frozen=True)
class Diagnostic:
    span: Span
    message: str
    notes: tuple = field(default=())   # extra lines ("note: ...")

    code: ClassVar[str] = ""
    severity: ClassVar[str] = ERROR
    summary: ClassVar[str] = ""

    def __init_subclass__(cls, **kw):
        super().__init_subclass__(**kw)
        if cls.code:
            if cls.code in REGISTRY:
                raise RuntimeError(f"duplicate diagnostic code {cls.code}")
            REGISTRY[cls.code] = cls

    def to_dict(self) -> dict:
        return {
            "path": self.span.path,
            "line": self.span.line,
            "column": self.span.col,
            "end_line": self.span.end_line,
            "end_column": self.span.end_col,
            "severity": self.severity,
            "code": self.code,
            "message": self.message,
            "notes": list(self.notes),
        }


class Sink:
    """Collects diagnostics in the order they are found."""

    def __init__(self) -> None:
        self.items: List[Diagnostic] = []

    def add(self, kind: Type[Diagnostic], span: Span, message: str, *notes: str) -> Diagnostic:
        d = kind(span, message, tuple(notes))
        self.items.append(d)
        return d

    @property
    def errors(self) -> List[Diagnostic]:
        return [d for d in self.items if d.severity == ERROR]

    @property
    def has_errors(self) -> bool:
        return any(d.severity == ERROR for d in self.items)

    def extend(self, other: "Sink") -> None:
        self.items.extend(other.items)


class PortfolioError(Exception):
    """Raised by the Python API when a portfolio has errors.

    ``diagnostics`` holds every finding (errors and warnings).
    """

    def __init__(self, diagnostics: List[Diagnostic]):
        self.diagnostics = list(diagnostics)
        first = next((d for d in self.diagnostics if d.severity == ERROR), None)
        text = f"{first.span}: {first.code}: {first.message}" if first else "portfolio has errors"
        more = len([d for d in self.diagnostics if d.severity == ERROR]) - 1
        if more > 0:
            text += f" (and {more} more error{'s' if more > 1 else ''})"
        super().__init__(text)


# Exit codes, owned by Report and the CLI.  Documented in docs/cli.md.
EXIT_OK = 0            # clean, or warnings only; dispatch: optimal / within gap
EXIT_ERRORS = 1        # lint errors found
EXIT_USAGE = 2         # bad command line or unreadable file
EXIT_INFEASIBLE = 3    # dispatch: the portfolio's limits cannot all hold
EXIT_UNBOUNDED = 4     # dispatch: profit is unbounded (a missing limit)
EXIT_NO_SCHEDULE = 5   # dispatch: time or other limit hit with no schedule found
EXIT_SOLVER = 6        # dispatch: solver failed for another reason


class Report:
    """Counts what was found across files and decides the exit code."""

    def __init__(self) -> None:
        self.files = 0
        self.errors = 0
        self.warnings = 0
        self.unreadable = 0

    def add(self, diagnostics) -> None:
        self.files += 1
        for d in diagnostics:
            if d.severity == ERROR:
                self.errors += 1
            else:
                self.warnings += 1

    def add_unreadable(self) -> None:
        self.unreadable += 1

    @property
    def exit_code(self) -> int:
        if self.unreadable:
            return EXIT_USAGE
        if self.errors:
            return EXIT_ERRORS
        return EXIT_OK

    def summary(self) -> str:
        def plural(n, word):
            return f"{n} {word}{'' if n == 1 else 's'}"
        parts = [plural(self.errors, "error"), plural(self.warnings, "warning")]
        text = f"{plural(self.files, 'file')} checked: " + ", ".join(parts)
        if self.unreadable:
            text += f", {self.unreadable} unreadable"
        return text


def _kind(code: str, severity: str, summary: str, name: str) -> Type[Diagnostic]:
    """A kind of diagnostic: a subclass with no fields of its own, so it inherits the frozen
    dataclass's methods as they are (decorating each of about 100 kinds again took 70 ms of
    every command's start)."""
    return type(name, (Diagnostic,), {"code": code, "severity": severity, "summary": summary,
                                      "__module__": __name__, "__doc__": summary,
                                      "__setattr__": _frozen, "__delattr__": _frozen})


def _frozen(self, name, *value):
    """A kind's instances are as frozen as the dataclass's own: no attribute set or deleted."""
    raise FrozenInstanceError(f"cannot assign to field {name!r}")


# --- P0xx: files --------------------------------------------------------------
UnreadableFile = _kind("P001", ERROR, "the portfolio file cannot be read (missing, not text, not UTF-8)", "UnreadableFile")

# --- P1xx: syntax -------------------------------------------------------------
SyntaxProblem = _kind("P101", ERROR, "the text does not follow the language's grammar", "SyntaxProblem")
UnclosedBlock = _kind("P102", ERROR, "a '{' block is not closed before the end of the file", "UnclosedBlock")
BadTimestamp = _kind("P103", ERROR, "a timestamp is not a valid ISO 8601 date and time", "BadTimestamp")
RetiredWord = _kind("P104", ERROR, "a word the language no longer uses; the message names the word that replaced it", "RetiredWord")

# --- P2xx: names --------------------------------------------------------------
UnknownName = _kind("P201", ERROR, "a name refers to nothing declared (with a suggestion when one is close)", "UnknownName")
DuplicateName = _kind("P202", ERROR, "a name is declared twice (all names share one namespace)", "DuplicateName")
DuplicateSetting = _kind("P203", ERROR, "the same setting is given twice in one block", "DuplicateSetting")
MissingSetting = _kind("P204", ERROR, "a required setting or statement is missing", "MissingSetting")
ReservedName = _kind("P206", ERROR, "a name is reserved for an output file (schedule, summary)", "ReservedName")
WrongNameKind = _kind("P205", ERROR, "a name refers to a declaration of the wrong kind", "WrongNameKind")
NameTooLong = _kind("P207", ERROR, "a name is too long to name its output file", "NameTooLong")
StudyTargetUnknown = _kind("P209", ERROR, "a study varies a setting or series that does not exist (an undeclared name, or a setting its declaration does not have)", "StudyTargetUnknown")
NameCaseClash = _kind("P208", ERROR, "two names differ only in letter case (their output files would collide)", "NameCaseClash")

# --- P3xx: units and values ---------------------------------------------------
UnknownUnit = _kind("P301", ERROR, "a unit is not one the language knows", "UnknownUnit")
WrongDimension = _kind("P302", ERROR, "a quantity has the wrong dimension (a power where an energy is needed, ...)", "WrongDimension")
OutOfRange = _kind("P303", ERROR, "a value is outside its allowed range (negative capacity, efficiency above 100 %, zero step, ...)", "OutOfRange")
SocInconsistent = _kind("P304", ERROR, "state-of-charge bounds, start and end rule contradict each other or the capacity", "SocInconsistent")
UnknownZone = _kind("P305", ERROR, "the time zone is not an IANA zone name", "UnknownZone")
HorizonMisfit = _kind("P306", ERROR, "the horizon length is not a whole number of steps", "HorizonMisfit")
LimitInconsistent = _kind("P307", ERROR, "a minimum exceeds its maximum, or a rule needs a limit that is absent", "LimitInconsistent")
UnusedSetting = _kind("P308", WARNING, "a setting has no effect as declared, or less than it appears to", "UnusedSetting")
UnusedPreset = _kind("P309", WARNING, "a preset is declared but no storage takes it", "UnusedPreset")
RuleTooLong = _kind("P310", WARNING, "a run or rest rule is longer than the horizon, or it or a state carried in from before the horizon is not a whole number of steps", "RuleTooLong")
ImportUnpriced = _kind("P311", ERROR, "a connection can import but has no 'buy at' price (imports would be free)", "ImportUnpriced")
ExportUnpriced = _kind("P312", WARNING, "a connection can export but has no 'sell at' price (exports earn nothing)", "ExportUnpriced")
Implausible = _kind("P313", ERROR, "a value is beyond any plausible plant or market (1 TW, 1 PWh, 1e8 per MWh, ...)", "Implausible")
StudyEmptyRange = _kind("P314", ERROR, "a study's range or list of values (or of scenarios) is empty", "StudyEmptyRange")
StudyValueOutOfRange = _kind("P315", ERROR, "a value a study gives a setting is outside what that setting allows (or a study has too many cases)", "StudyValueOutOfRange")
StudyUnpaired = _kind("P316", ERROR, "a study's cases are 'paired' but its lists of values and scenarios differ in length", "StudyUnpaired")
UnknownCurrency = _kind("P317", ERROR, "a currency is not an ISO 4217 code (three capital letters of a listed currency)", "UnknownCurrency")
VolumeWithoutEquivalent = _kind("P318", ERROR, "a water volume or flow is given where an energy or power is meant, on a store with no 'energy equivalent'", "VolumeWithoutEquivalent")
EfficiencyCountedTwice = _kind("P319", WARNING, "a store declared in volume has a discharge efficiency below 100 %, which counts the plant's losses twice", "EfficiencyCountedTwice")

# --- P4xx: time series --------------------------------------------------------
SeriesFileMissing = _kind("P401", ERROR, "a series file cannot be found or read", "SeriesFileMissing")
SeriesColumnMissing = _kind("P402", ERROR, "a series column (or the time column) is not in the file", "SeriesColumnMissing")
SeriesBadValue = _kind("P403", ERROR, "a series cell is empty or not a number (the CSV row is given)", "SeriesBadValue")
SeriesBadTime = _kind("P404", ERROR, "a timestamp in a series cannot be read (the CSV row is given)", "SeriesBadTime")
SeriesUnsorted = _kind("P405", ERROR, "series timestamps are duplicated or not in increasing order", "SeriesUnsorted")
SeriesDstGap = _kind("P406", ERROR, "a local timestamp falls in a daylight-saving gap or is ambiguous", "SeriesDstGap")
SeriesCoverage = _kind("P407", ERROR, "a series does not cover the whole horizon", "SeriesCoverage")
SeriesLength = _kind("P408", ERROR, "an inline list does not have one value per step", "SeriesLength")
SeriesEmpty = _kind("P409", ERROR, "a series file has no data rows", "SeriesEmpty")
SeriesNegative = _kind("P410", ERROR, "a power profile has negative values", "SeriesNegative")
SeriesImplausible = _kind("P411", ERROR, "a series has values beyond any plausible plant or market", "SeriesImplausible")
SeriesOutsideFolder = _kind("P412", ERROR, "confined mode: a series file lies outside the portfolio's folder", "SeriesOutsideFolder")
SeriesRowTooLong = _kind("P413", ERROR, "a CSV data row has more fields than the header (a decimal comma is named as such)", "SeriesRowTooLong")
SeriesRowTooShort = _kind("P414", ERROR, "a CSV data row has fewer fields than the header, though the cells a series reads are there", "SeriesRowTooShort")
SeriesGap = _kind("P415", ERROR, "a regular series misses rows inside the horizon (say 'gaps hold' or 'gaps interpolate' to fill them)", "SeriesGap")
ScenarioHorizon = _kind("P417", ERROR, "a study's scenario series does not cover the portfolio's horizon (scenario files must share it)", "ScenarioHorizon")
SeriesGapFilled = _kind("P416", WARNING, "missing rows of a regular series were filled as its 'gaps' option says", "SeriesGapFilled")

# --- P5xx: topology -----------------------------------------------------------
NoPathToGrid = _kind("P501", ERROR, "a storage or supply has no path to any connection or demand", "NoPathToGrid")
ZeroDelayCycle = _kind("P502", ERROR, "routes form a cycle with zero total delay", "ZeroDelayCycle")
NowhereToGo = _kind("P503", WARNING, "a non-curtailable supply may have nowhere to go (likely infeasible)", "NowhereToGo")
RouteKindMismatch = _kind("P504", ERROR, "a route joins storages that cannot exchange what it carries", "RouteKindMismatch")
DelayNotWhole = _kind("P505", ERROR, "a route delay is not a whole number of steps", "DelayNotWhole")
RouteDuplicate = _kind("P506", ERROR, "a storage has two routes of the same kind (release and spill each go one way; a store is pumped from one store)", "RouteDuplicate")
SpillNotAllowed = _kind("P507", ERROR, "a spill route leaves a storage that does not allow spill", "SpillNotAllowed")
UnusedConnection = _kind("P508", WARNING, "a connection has no site attached", "UnusedConnection")
EmptySite = _kind("P509", WARNING, "a site has no storage, supply or demand", "EmptySite")
RouteToSelf = _kind("P510", ERROR, "a route leads from a storage back to itself", "RouteToSelf")
SupplyTargetElsewhere = _kind("P511", ERROR, "a supply is sent into a storage at another site", "SupplyTargetElsewhere")
SourceChargeMismatch = _kind("P512", ERROR, "a store's charging sources and the supplies fed into it disagree ('charge off' with a supply into it, or 'charge only from' naming a supply that does not feed it)", "SourceChargeMismatch")
WaterFromNothing = _kind("P513", ERROR, "a reservoir charges but no pump route brings it water (its charge would make water from nothing)", "WaterFromNothing")
