"""Which partitions a run covers: every input, or the UTC days of a range (inputs given by a {date} template).

* ``relcorr run CONFIG`` on a config with a ``{date}`` template and no dates: the previous UTC day
  (the nightly run);
* ``--date D``: that day; ``--from A [--to B]``: A to B inclusive (B defaults to the previous UTC day);
* days of the range without an input file are reported (run summary and manifest); the others run.

On a config without a template every input is a partition and a date range is a command-line error.
"""
from __future__ import annotations

import datetime
from dataclasses import dataclass, field

from pipelines.errors import ConfigError


def utc_today() -> datetime.date:
    """Today's UTC date (one place, so that tests can pin it)."""
    return datetime.datetime.now(datetime.timezone.utc).date()


@dataclass(frozen=True)
class Selection:
    partitions: list[str]
    date_from: str | None = None
    date_to: str | None = None
    missing_days: list[str] = field(default_factory=list)

    def describe(self) -> str:
        if self.date_from is None:
            return f"{len(self.partitions)} partition(s)"
        span = self.date_from if self.date_from == self.date_to else f"{self.date_from} .. {self.date_to}"
        return f"UTC days {span}: {len(self.partitions)} partition(s)" + (
            f", {len(self.missing_days)} day(s) without input" if self.missing_days else "")


def _day(text: str, option: str) -> datetime.date:
    try:
        return datetime.date.fromisoformat(text)
    except (TypeError, ValueError):
        raise ConfigError([("command line", option, f"found {text!r}, expected a date YYYY-MM-DD")]) from None


def select(cfg, date_from: str | None = None, date_to: str | None = None, date: str | None = None) -> Selection:
    """The partitions of a run (see the module docstring)."""
    if not cfg.dated:
        if date_from or date_to or date:
            raise ConfigError([(str(cfg.path), "pipeline.inputs",
                                "a date range needs inputs organised by day: a path template with a {date} field")])
        return Selection([pid for pid, _ in cfg.partitions()])
    if date and (date_from or date_to):
        raise ConfigError([("command line", "--date", "give either --date or --from/--to")])
    if date_to and not date_from:
        raise ConfigError([("command line", "--to", "found --to without --from")])
    yesterday = utc_today() - datetime.timedelta(days=1)
    if date:
        lo = hi = _day(date, "--date")
    elif date_from:
        lo = _day(date_from, "--from")
        hi = _day(date_to, "--to") if date_to else yesterday
    else:
        lo = hi = yesterday
    if hi < lo:
        raise ConfigError([("command line", "--to", f"found {hi}, expected a day on or after --from {lo}")])
    by_day: dict[str, list[str]] = {}
    for pid, day in cfg.input_dates.items():
        by_day.setdefault(day, []).append(pid)
    days = [(lo + datetime.timedelta(days=k)).isoformat() for k in range((hi - lo).days + 1)]
    chosen = sorted(pid for d in days for pid in by_day.get(d, []))
    missing = [d for d in days if d not in by_day]
    return Selection(chosen, lo.isoformat(), hi.isoformat(), missing)
