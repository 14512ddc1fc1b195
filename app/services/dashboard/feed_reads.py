"""The reads behind the overview's counts and chart feeds, kept per campaign and brought up to
date with the new shots alone when nothing else changed.

On shift a shot arrives every few seconds and moves the campaign's change marks
(``app.store.dashboard.change_marks``); reading every feed again from the whole campaign after
each one cost about 0.9 s of CPU at 100,000 shots. Counts add up, and a thinned series keeps
every k-th shot by key in time order, so when the new marks differ from the old by new shots
only (``only_new_shots``: the same settings, no job that rewrites shots queued or running, and
since then no audited write of the campaign but ingests), each read is the old one and the same
read of the shots stored since, merged in time order: the same rows as reading afresh. A read
whose k changed with the new count is read afresh.

``Reader`` is what the figures ask: ``DirectReader`` reads the database each time (tests, the
regime map of other axes), ``CachedReader`` goes through a campaign's ``CampaignReads``.

Charts whose series thin alike share one read: the overview's charts (``SeriesRequest``) that
keep the same 1-in-k of a status (the calibration and regime maps, the timeline and the phase
chart, when as many shots have each chart's values) read those shots once, with every column
any of them shows and the shots having any of their values, and each takes its rows and
columns from it: the same rows as its own read (a 100,000-shot campaign's first load read
six series instead of twelve: 40-60 ms less of SQLite's time in the raw queries).
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Hashable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar

from sqlalchemy.orm import Session

from app.services.alerts import KIND as ALERT_DELIVERY_KIND
from app.services.detailed_runs.lifecycle import RUN_KIND as DETAILED_RUN_KIND
from app.store import dashboard as store
from app.tables import Campaign

T = TypeVar("T")

# The change marks and the settings version they were read with.
Marks = tuple[Any, ...]

# Audited actions of a campaign that leave its stored shots, their evaluations, flags and
# exclusions as they were (new shots are read as new shots).
SHOTS_KEPT_ACTIONS = frozenset({"shots.ingest", "detailed_run.start", "alerts.target.add", "alerts.target.delete"})
# Job kinds that write no shot, evaluation or flag (a re-evaluation does).
SHOTS_KEPT_JOB_KINDS = frozenset({DETAILED_RUN_KIND, ALERT_DELIVERY_KIND})


def campaign_marks(session: Session, campaign: Campaign) -> Marks:
    """The campaign's change marks and its settings version: what its cached reads are valid for."""
    return (*store.change_marks(session, campaign), campaign.settings_version)


def only_new_shots(session: Session, campaign: Campaign, old: Marks, new: Marks) -> bool:
    """Whether everything read at ``old`` still holds at ``new`` but for the shots stored since."""
    (old_pk, old_audit, old_jobs, old_settings), (new_pk, new_audit, new_jobs, new_settings) = old, new
    return (
        new_settings == old_settings
        and new_pk >= old_pk
        and new_audit >= old_audit
        and all(kind in SHOTS_KEPT_JOB_KINDS for _, kind, _, _ in (*old_jobs, *new_jobs))
        and store.audit_actions_between(session, campaign, old_audit, new_audit) <= SHOTS_KEPT_ACTIONS
    )


@dataclass(frozen=True)
class _Read:
    upto_pk: int
    step: int
    value: Any


class CampaignReads:
    """The reads of one campaign at one set of marks. A read already made at these marks is handed
    out again; one made at earlier marks (``earlier``, only new shots since) is extended."""

    def __init__(self, marks: Marks, earlier: Mapping[Hashable, _Read]) -> None:
        self.marks = marks
        self._earlier = dict(earlier)
        self._reads: dict[Hashable, _Read] = {}
        self._locks: dict[Hashable, threading.Lock] = {}

    @property
    def upto_pk(self) -> int:
        return int(self.marks[0])

    def read(self, key: Hashable, step: int, fresh: Callable[[int | None], T], merge: Callable[[T, T], T]) -> T:
        """The read ``key`` (thinned to every ``step``-th shot): ``fresh(after_pk)`` reads the shots up
        to these marks stored after ``after_pk`` (None: all), ``merge(old, new)`` joins two reads.
        Feeds asking for the same read at once share it (the first reads, the others wait)."""
        with self._locks.setdefault(key, threading.Lock()):
            done = self._reads.get(key)
            if done is not None and done.step == step:
                return done.value
            earlier = self._earlier.get(key)
            if earlier is not None and earlier.step == step and earlier.upto_pk <= self.upto_pk:
                value = earlier.value
                if earlier.upto_pk < self.upto_pk:
                    value = merge(value, fresh(earlier.upto_pk))
            else:
                value = fresh(None)
            self._reads[key] = _Read(self.upto_pk, step, value)
            return value

    def handed_on(self) -> dict[Hashable, _Read]:
        """Every read this one holds, made here or earlier, for the next marks to extend."""
        return {**self._earlier, **self._reads}


# By database and campaign: the reads at the latest marks seen.
_CAMPAIGNS: dict[tuple[str, int], CampaignReads] = {}
_CAMPAIGNS_MAX = 64
_CAMPAIGNS_LOCK = threading.Lock()


def campaign_reads(session: Session, campaign: Campaign, marks: Marks) -> CampaignReads:
    """The campaign's reads at ``marks``, extending those at the marks before when only new shots
    arrived since. A request that read older marks than the latest seen gets reads of its own."""
    where = (str(session.get_bind().engine.url), campaign.id)
    with _CAMPAIGNS_LOCK:
        current = _CAMPAIGNS.get(where)
        if current is not None and current.marks == marks:
            return current
        if current is not None and not (marks[0] >= current.marks[0] and marks[1] >= current.marks[1]):
            return CampaignReads(marks, {})  # behind the latest: not kept
        handed = (
            current.handed_on()
            if current is not None and only_new_shots(session, campaign, current.marks, marks)
            else {}
        )
        fresh = CampaignReads(marks, handed)
        if len(_CAMPAIGNS) >= _CAMPAIGNS_MAX and where not in _CAMPAIGNS:
            _CAMPAIGNS.clear()
        _CAMPAIGNS[where] = fresh
        return fresh


# ------------------------------------------------------------------------------- readers


def _add_counts(old: dict[str, dict[str, int]], new: dict[str, dict[str, int]]) -> dict[str, dict[str, int]]:
    return {name: {s: n + new[name].get(s, 0) for s, n in by_status.items()} for name, by_status in old.items()}


def _in_time_order(old: list[store.SeriesRow], new: list[store.SeriesRow]) -> list[store.SeriesRow]:
    # New shots are nearly always the latest, but a shot may be stored with an earlier time.
    if not new:
        return old
    if not old or store.series_order(old[-1]) < store.series_order(new[0]):
        return old + new
    return sorted(old + new, key=store.series_order)


def _concatenated(old: list[float], new: list[float]) -> list[float]:
    return old + new


class Reader:
    """The reads the overview's figures are drawn from, up to the shot key ``upto_pk``."""

    upto_pk: int | None

    def value_counts(self, sets: Mapping[str, Sequence[str]]) -> dict[str, dict[str, int]]:
        """Shots per status that have all the numeric columns of each named set."""
        raise NotImplementedError

    def series_rows(
        self, status: str, columns: Sequence[str], *, step: int, required: Sequence[str]
    ) -> list[store.SeriesRow]:
        """store.status_rows of the numeric columns ``columns`` (and ``shot_id``, ``taken_at``)."""
        raise NotImplementedError

    def phase_rows(self, sources: Sequence[str], *, step: int) -> list[store.SeriesRow]:
        raise NotImplementedError

    def density_offsets(self, *, step: int) -> list[float]:
        raise NotImplementedError


_SHOT_COLUMNS = {"shot_id": store.Shot.shot_id, "taken_at": store.Shot.taken_at}


@dataclass(frozen=True)
class SeriesRequest:
    """What one chart reads of each status's shots: its columns (``shot_id``, ``taken_at`` and
    numeric columns), the values a shot needs to be drawn, and the points it keeps of nominal
    and of flagged shots."""

    columns: tuple[str, ...]
    required: tuple[str, ...]
    nominal_points: int
    flagged_points: int

    def points(self, status: str) -> int:
        return self.nominal_points if status == "nominal" else self.flagged_points

    def step(self, status: str, totals: Mapping[str, int]) -> int:
        """k of the 1-in-k it keeps of ``status``, given the shots per status that have its values."""
        return store.thinning_step(totals.get(status, 0), self.points(status))


def _projected(
    rows: list[store.SeriesRow], read: Sequence[str], columns: Sequence[str], required: Sequence[str]
) -> list[store.SeriesRow]:
    """The rows of a shared read (columns ``read``) that have the ``required`` values, with ``columns`` only."""
    where = {name: 2 + i for i, name in enumerate(read)}
    picked = [where[c] for c in columns]
    needed = [where[c] for c in required]
    return [(row[0], row[1], *(row[i] for i in picked)) for row in rows if all(row[i] is not None for i in needed)]


def _column(name: str) -> Any:
    return _SHOT_COLUMNS.get(name, store.NUMERIC_COLUMNS.get(name))


class DirectReader(Reader):
    """Every read from the database, now."""

    def __init__(self, session: Session, campaign: Campaign, upto_pk: int | None = None) -> None:
        self.session, self.campaign_id, self.upto_pk = session, campaign.id, upto_pk

    def _counts(self, sets: Mapping[str, Sequence[str]], after_pk: int | None = None) -> dict[str, dict[str, int]]:
        columns = {name: [store.NUMERIC_COLUMNS[c] for c in names] for name, names in sets.items()}
        return store.counts_with_values_of(
            self.session, self.campaign_id, columns, upto_pk=self.upto_pk, after_pk=after_pk
        )

    def value_counts(self, sets: Mapping[str, Sequence[str]]) -> dict[str, dict[str, int]]:
        return self._counts(sets)

    def _series_rows(
        self,
        status: str,
        columns: Sequence[str],
        step: int,
        required: Sequence[str],
        after_pk: int | None = None,
        required_any: Sequence[Sequence[str]] = (),
    ) -> list[store.SeriesRow]:
        return store.status_rows(
            self.session,
            self.campaign_id,
            status,
            [_column(c) for c in columns],
            step=step,
            required=[store.NUMERIC_COLUMNS[c] for c in required],
            required_any=[[store.NUMERIC_COLUMNS[c] for c in names] for names in required_any],
            upto_pk=self.upto_pk,
            after_pk=after_pk,
        )

    def series_rows(
        self, status: str, columns: Sequence[str], *, step: int, required: Sequence[str]
    ) -> list[store.SeriesRow]:
        return self._series_rows(status, columns, step, required)

    def _phase_rows(self, sources: Sequence[str], step: int, after_pk: int | None = None) -> list[store.SeriesRow]:
        return store.phase_series_rows(
            self.session, self.campaign_id, sources, step=step, upto_pk=self.upto_pk, after_pk=after_pk
        )

    def phase_rows(self, sources: Sequence[str], *, step: int) -> list[store.SeriesRow]:
        return self._phase_rows(sources, step)

    def _density_offsets(self, step: int, after_pk: int | None = None) -> list[float]:
        return store.density_offsets_read(
            self.session, self.campaign_id, step=step, upto_pk=self.upto_pk, after_pk=after_pk
        )

    def density_offsets(self, *, step: int) -> list[float]:
        return self._density_offsets(step)


class CachedReader(DirectReader):
    """The same reads through the campaign's CampaignReads: made once per marks, extended after.
    ``shared``: the page's series requests by chart, whose value counts (``values_counted``) the
    page's feeds share; series of them that thin alike share one read."""

    def __init__(
        self,
        session: Session,
        campaign: Campaign,
        reads: CampaignReads,
        shared: Mapping[str, SeriesRequest] | None = None,
    ) -> None:
        super().__init__(session, campaign, reads.upto_pk)
        self.reads = reads
        self.shared = shared or {}
        self.counted = self.values_counted(self.shared)

    @staticmethod
    def values_counted(shared: Mapping[str, SeriesRequest]) -> dict[str, tuple[str, ...]]:
        """The value sets whose shots per status are counted, by chart: each request's own."""
        return {name: request.required for name, request in shared.items()}

    def _sharing(
        self, status: str, columns: Sequence[str], step: int, required: Sequence[str]
    ) -> tuple[tuple[str, ...], tuple[tuple[str, ...], ...]] | None:
        """The columns and the value sets of the shared read this series is one of, if any."""
        if not self.shared:
            return None
        counts = self.value_counts(self.counted)
        alike = [r for name, r in self.shared.items() if r.step(status, counts[name]) == step]
        if len(alike) < 2 or (tuple(columns), tuple(required)) not in {(r.columns, r.required) for r in alike}:
            return None
        columns_read = tuple(dict.fromkeys(c for r in alike for c in r.columns))
        return columns_read, tuple(dict.fromkeys(r.required for r in alike))

    def value_counts(self, sets: Mapping[str, Sequence[str]]) -> dict[str, dict[str, int]]:
        key = ("counts", tuple((name, tuple(columns)) for name, columns in sets.items()))
        return self.reads.read(key, 1, lambda after: self._counts(sets, after), _add_counts)

    def series_rows(
        self, status: str, columns: Sequence[str], *, step: int, required: Sequence[str]
    ) -> list[store.SeriesRow]:
        sharing = self._sharing(status, columns, step, required)
        if sharing is None:
            key = ("series", status, tuple(columns), tuple(required))
            return self.reads.read(
                key, step, lambda after: self._series_rows(status, columns, step, required, after), _in_time_order
            )
        read, value_sets = sharing
        rows = self.reads.read(
            ("shared series", status, read, value_sets),
            step,
            lambda after: self._series_rows(status, read, step, (), after, value_sets),
            _in_time_order,
        )
        return _projected(rows, read, columns, required)

    def phase_rows(self, sources: Sequence[str], *, step: int) -> list[store.SeriesRow]:
        key = ("phase", tuple(sources))
        return self.reads.read(key, step, lambda after: self._phase_rows(sources, step, after), _in_time_order)

    def density_offsets(self, *, step: int) -> list[float]:
        return self.reads.read(("offsets",), step, lambda after: self._density_offsets(step, after), _concatenated)
