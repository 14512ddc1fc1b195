"""Time in wakeledger: UTC inside, the campaign's zone on screen, ISO weeks for summaries.

- ``campaign_zone(name)`` is the one way to get a campaign's zone. A name that is not a
  known IANA zone (it can only come from a hand-edited database: campaigns are created
  with a checked zone) falls back to UTC everywhere, logged once, and whatever shows
  times (pages, summaries, exports) names the zone it actually used (``zone.key``).
- ``format_utc`` is how the API, the CSV files and the JSON exports write an instant:
  ISO 8601 / RFC 3339 in UTC with the ``Z`` offset; ``utc_texts`` and ``local_texts`` write
  a whole column the way ``format_utc`` and ``iso_text`` write one.
- ``local_text`` is how pages and reports show a moment: wall-clock time in the zone.
- ``IsoWeek`` and ``current_week``: ISO weeks in a zone (Monday 00:00 local to Monday 00:00).
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from functools import lru_cache
from typing import Literal, overload
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np

log = logging.getLogger(__name__)

UTC_ZONE = ZoneInfo("UTC")
LOCAL_FORMAT = "%Y-%m-%d %H:%M:%S"
# No shot is older than this (the service refuses earlier taken_at values), so weeks
# before its year hold nothing; the last ISO year keeps every week's bounds representable.
EARLIEST_SHOT_TIME = datetime(1990, 1, 1, tzinfo=UTC)
WEEK_YEARS = (EARLIEST_SHOT_TIME.year, 9998)


@lru_cache(maxsize=256)
def campaign_zone(name: str | None) -> ZoneInfo:
    """The IANA zone of a campaign; UTC (logged) when the name is not a known zone."""
    try:
        return ZoneInfo(name or "UTC")
    except (ZoneInfoNotFoundError, ValueError):
        log.warning("unknown time zone %r: using UTC", name)
        return UTC_ZONE


@overload
def as_utc(moment: datetime) -> datetime: ...
@overload
def as_utc(moment: None) -> None: ...
def as_utc(moment: datetime | None) -> datetime | None:
    """Aware datetimes to UTC; naive ones (an SQLite round trip) are already UTC."""
    if moment is None:
        return None
    if moment.tzinfo is None:
        return moment.replace(tzinfo=UTC)
    return moment.astimezone(UTC)


def format_utc(moment: datetime) -> str:
    """ISO 8601 / RFC 3339 in UTC with a Z suffix (four-digit year); milliseconds (or
    microseconds) only when present."""
    when = as_utc(moment)
    assert when is not None
    # isoformat (C) writes YYYY-MM-DDTHH:MM:SS, then .ffffff when there are microseconds, then +00:00
    text = when.isoformat()
    if when.microsecond % 1000 or not when.microsecond:
        return text[:-6] + "Z"
    return text[:-9] + "Z"  # whole milliseconds: three digits


def iso_text(moment: datetime) -> str:
    """ISO 8601: UTC as ``format_utc`` writes it, other offsets as they are."""
    return format_utc(moment) if moment.utcoffset() in (None, timedelta(0)) else moment.isoformat()


_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_MICROSECOND = timedelta(microseconds=1)


def _aware(moment: datetime) -> datetime:
    return moment if moment.tzinfo is not None else moment.replace(tzinfo=UTC)  # naive: UTC (an SQLite round trip)


def _microseconds(moments: list[datetime]) -> np.ndarray:
    """Microseconds since 1970 (UTC; naive moments are UTC) as int64."""
    return np.array([(_aware(m) - _EPOCH) // _MICROSECOND for m in moments], dtype=np.int64)


def epoch_seconds(moments: list[datetime]) -> np.ndarray:
    """Seconds since 1970 (UTC; naive moments are UTC) as float64, the microseconds divided exactly once."""
    return _microseconds(moments) / 1e6


def _wall_texts(micros: np.ndarray, millis: bool) -> np.ndarray:
    """ISO 8601 wall times of microseconds since 1970 without an offset: no fraction when there is
    none, else milliseconds where they suffice (``millis``) or microseconds."""
    stamps = micros.astype("datetime64[us]")
    fraction = micros % 1_000_000
    out = np.empty(micros.size, dtype=object)
    units: list[tuple[Literal["s", "ms", "us"], np.ndarray]] = [("s", fraction == 0)]
    if millis:
        units += [("ms", (fraction != 0) & (fraction % 1000 == 0)), ("us", fraction % 1000 != 0)]
    else:
        units += [("us", fraction != 0)]
    for unit, chosen in units:
        if chosen.any():
            out[chosen] = np.datetime_as_string(stamps[chosen], unit=unit)
    return out


def utc_texts(moments: list[datetime]) -> list[str]:
    """``format_utc`` of every moment, for a whole column at once."""
    if not moments:
        return []
    return (_wall_texts(_microseconds(moments), millis=True) + "Z").tolist()


def _by_offset(moments: list[datetime], zone: ZoneInfo) -> dict[timedelta, list[int]]:
    """The rows of the moments by their UTC offset in ``zone``."""
    offsets: dict[timedelta, list[int]] = {}
    for i, moment in enumerate(moments):
        offsets.setdefault(_aware(moment).astimezone(zone).utcoffset() or timedelta(0), []).append(i)
    return offsets


def local_texts(moments: list[datetime], zone: ZoneInfo) -> list[str]:
    """``iso_text(moment.astimezone(zone))`` of every moment (UTC ones, naive ones too), for a whole column."""
    if not moments:
        return []
    micros = _microseconds(moments)
    out = np.empty(len(moments), dtype=object)
    for offset, rows in _by_offset(moments, zone).items():
        picked = np.array(rows)
        if not offset:
            out[picked] = _wall_texts(micros[picked], millis=True) + "Z"
            continue
        # The offset as isoformat writes it (+01:00, or +00:34:08 for an old local mean time).
        sample = _aware(moments[rows[0]]).astimezone(zone)
        suffix = sample.isoformat()[len(sample.replace(tzinfo=None).isoformat()) :]
        out[picked] = _wall_texts(micros[picked] + offset // _MICROSECOND, millis=False) + suffix
    return out.tolist()


def local_wall_texts(moments: list[datetime], zone: ZoneInfo) -> list[str]:
    """``local_text`` of every moment (UTC ones, naive ones too; years 1000 to 9999), for a whole column."""
    if not moments:
        return []
    wall = _microseconds(moments)
    for offset, rows in _by_offset(moments, zone).items():
        wall[rows] += offset // _MICROSECOND
    texts = np.datetime_as_string(wall.astype("datetime64[us]").astype("datetime64[s]"), unit="s")
    return np.char.replace(texts, "T", " ").tolist()  # LOCAL_FORMAT


def local_time(moment: datetime | None, zone: ZoneInfo) -> datetime | None:
    moment = as_utc(moment)
    return moment.astimezone(zone) if moment else None


def local_text(moment: datetime | None, zone: ZoneInfo) -> str:
    """Wall-clock time in ``zone`` as pages and reports show it; empty for none."""
    local = local_time(moment, zone)
    return local.strftime(LOCAL_FORMAT) if local else ""


def chart_time(moment: datetime | None, zone: ZoneInfo) -> str | None:
    """Plotly date axes have no zone: local wall-clock text, the axis titled with the zone."""
    local = local_time(moment, zone)
    return local.replace(tzinfo=None).isoformat(sep=" ", timespec="seconds") if local else None


class WeekFormatError(ValueError):
    """The week is not an ISO week of the form YYYY-Www that exists in that year."""


_WEEK_RE = re.compile(r"^(\d{4})-?W(\d{2})$", re.IGNORECASE)


@dataclass(frozen=True, order=True)
class IsoWeek:
    year: int
    week: int

    @classmethod
    def parse(cls, text: str) -> IsoWeek:
        match = _WEEK_RE.match(text.strip()) if isinstance(text, str) else None
        if not match:
            raise WeekFormatError(f"week {text!r} is not an ISO week; write it as YYYY-Www, e.g. 2026-W47")
        year, week = int(match.group(1)), int(match.group(2))
        if not WEEK_YEARS[0] <= year <= WEEK_YEARS[1]:
            raise WeekFormatError(
                f"week {text!r} is outside the years {WEEK_YEARS[0]} to {WEEK_YEARS[1]} this service keeps shots for"
            )
        try:
            date.fromisocalendar(year, week, 1)
        except ValueError:
            last = date(year, 12, 28).isocalendar().week
            raise WeekFormatError(
                f"week {text!r} does not exist: ISO year {year} has weeks W01 to W{last:02d}"
            ) from None
        return cls(year, week)

    @classmethod
    def containing(cls, moment: datetime, zone: ZoneInfo) -> IsoWeek:
        iso = moment.astimezone(zone).date().isocalendar()
        return cls(iso.year, iso.week)

    @property
    def label(self) -> str:
        return f"{self.year}-W{self.week:02d}"

    def __str__(self) -> str:
        return self.label

    def monday(self) -> date:
        return date.fromisocalendar(self.year, self.week, 1)

    def previous(self) -> IsoWeek:
        iso = (self.monday() - timedelta(days=7)).isocalendar()
        return IsoWeek(iso.year, iso.week)

    def bounds_local(self, zone: ZoneInfo) -> tuple[datetime, datetime]:
        """Monday 00:00 local to the next Monday 00:00 local (a DST week is 167 or 169 hours)."""
        start = datetime.combine(self.monday(), time(0), tzinfo=zone)
        end = datetime.combine(self.monday() + timedelta(days=7), time(0), tzinfo=zone)
        return start, end

    def bounds_utc(self, zone: ZoneInfo) -> tuple[datetime, datetime]:
        start, end = self.bounds_local(zone)
        return start.astimezone(UTC), end.astimezone(UTC)


def current_week(zone: ZoneInfo, now: datetime | None = None) -> IsoWeek:
    """The ISO week that ``now`` (default: this moment) falls in, in ``zone``."""
    return IsoWeek.containing(now or datetime.now(UTC), zone)


_DURATION_RE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(s|m|h|d|w)?\s*$", re.IGNORECASE)
_DURATION_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400, "w": 604800}


def parse_duration(text: str) -> timedelta:
    """``90d``, ``12h``, ``30m``, ``45s``, ``2w`` (a bare number is seconds); ValueError otherwise."""
    match = _DURATION_RE.match(text) if isinstance(text, str) else None
    if not match:
        raise ValueError(f"{text!r} is not a duration; write e.g. 90d, 12h, 30m or 2w")
    return timedelta(seconds=float(match.group(1)) * _DURATION_UNITS[(match.group(2) or "s").lower()])
