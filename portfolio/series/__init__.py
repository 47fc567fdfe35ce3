"""Time series: load, check and resample onto the horizon.

The checker turns each series statement of a ``.folio`` file into a
:class:`SeriesSpec` and calls :func:`load_series`.  A spec takes its numbers
from a CSV file (a time column and a value column), from an inline list (one
number a step) or from a constant.  What comes back is one
:class:`portfolio.model.Series` per spec that loaded cleanly; every fault goes
to the :class:`~portfolio.diagnostics.Sink` as a P401-P416 diagnostic.

Rules (docs/series.md explains them for users):

* Timestamps are ISO 8601.  With a UTC offset or ``Z`` they are absolute;
  without one they are local time in the horizon's zone, and a local time
  that does not exist or happens twice there is an error (P406).
* Each row's value holds from its timestamp until the next row's; the last
  row holds for the file's median spacing.  A step's value is the
  time-weighted average of that step function over the step, computed on the
  cumulative integral (so hourly data on a 15-minute horizon is held, and
  5-minute data on an hourly horizon is averaged).
* The data must cover the horizon (P407).
* Every row has as many fields as the header (P413, P414).
* Rows missing from a regular file are an error (P415) unless the spec says
  to hold or interpolate across them (then P416, a warning, counts them):
  nothing fills a hole silently.

Faults inside a CSV file point into that file (line = file line, the header
being line 1) and carry a note naming the series' declaration; faults of the
declaration itself point at the ``.folio`` file.

Nothing here prints, and bad user data never raises: a spec that breaks the
API contract (no source or several, unknown quantity) raises ``ValueError``.

The package is split by job: ``table`` (bytes -> cells with their
positions), ``rows`` (the field count of each row), ``times`` (a time
column -> UTC instants), ``values`` (numbers, lists, constants), ``gaps``
(missing rows of a regular file, and their fill), ``align`` (coverage and
the step average onto the horizon) and ``load`` (the entry, one file at a
time).
"""

from .load import load_series
from .report import MAX_REPORTED
from .spec import QUANTITIES, SeriesSpec

__all__ = ["SeriesSpec", "load_series", "QUANTITIES", "MAX_REPORTED"]
