"""The shot table: its query (filters, sort, page), one page of rows, and the download
of the whole filtered set as the export table's CSV."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy.orm import Session

import model
from app.errors import InvalidInput
from app.presentation.csv_writer import CsvColumn
from app.presentation.fields import field_label, short_label
from app.services.exclusions import excluded_mode
from app.services.export_table import ShotTable, csv_columns, extra_paths
from app.store import dashboard as store
from app.store import exports as export_store
from app.store.dashboard import ShotFilter, ShotRow
from app.tables import Campaign, Shot
from app.times import campaign_zone

SEED_METHODS = model.SEED_METHODS
FLAG_CODES = model.FLAG_CODES

TABLE_PAGE_SIZE = 100
# The table's ``excluded`` choices (app.store.exclusions.EXCLUDED_MODES) as the form offers them.
EXCLUDED_CHOICES = (("omit", "left out"), ("include", "shown with the others"), ("only", "only excluded shots"))
TABLE_NOTES_CHARS = 1000  # notes wrap in their column; longer ones end with a link to the shot
TABLE_VALUE_COLUMNS = (
    "plasma_density_cm3",
    "driver_population",
    "driver_sigma_z_mm",
    "seed_position_mm",
    "efolds_exit",
    "growth_margin_efolds",
)


@dataclass
class TableQuery:
    filter: ShotFilter
    sort: str = "taken_at"
    descending: bool = True
    page: int = 1
    # The parameters as given, to refill the form and build links.
    params: dict[str, str] = field(default_factory=dict)


def _parse_local_datetime(text: str, zone: ZoneInfo) -> datetime:
    moment = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=zone)
    return moment.astimezone(UTC)


def parse_table_query(params: Mapping[str, str], campaign: Campaign) -> TableQuery:
    """Read the table's query parameters; InvalidInput names every value it cannot use."""
    zone = campaign_zone(campaign.timezone)
    problems: list[tuple[str, str]] = []
    given = {k: v.strip() for k, v in params.items() if isinstance(v, str) and v.strip()}
    flt = ShotFilter()
    if "status" in given:
        if given["status"] in model.STATUSES:
            flt.status = given["status"]
        else:
            problems.append(("status", f"choose one of {', '.join(model.STATUSES)}"))
    if "flag" in given:
        if given["flag"] in model.FLAG_CODES:
            flt.flag_code = given["flag"]
        else:
            problems.append(("flag", f"unknown flag code {given['flag']!r}"))
    if "seed" in given:
        if given["seed"] in model.SEED_METHODS:
            flt.seed_method = given["seed"]
        else:
            problems.append(("seed", f"choose one of {', '.join(model.SEED_METHODS)}"))
    for name, attr in (("from", "taken_from"), ("to", "taken_to")):
        if name in given:
            try:
                setattr(flt, attr, _parse_local_datetime(given[name], zone))
            except ValueError:
                problems.append((name, "write a date and time, e.g. 2026-11-17T09:00"))
    if flt.taken_from and flt.taken_to and flt.taken_from >= flt.taken_to:
        problems.append(("to", "must be later than 'from'"))
    if "excluded" in given:
        try:
            flt.excluded = excluded_mode(given["excluded"])
        except InvalidInput as exc:
            problems += exc.problems
    if "q" in given:
        if len(given["q"]) > 200:
            problems.append(("q", "at most 200 characters"))
        else:
            flt.text = given["q"]
    query = TableQuery(flt, params=given)
    if "sort" in given:
        if given["sort"] in store.SORT_COLUMNS:
            query.sort = given["sort"]
        else:
            problems.append(("sort", f"cannot sort by {given['sort']!r}"))
    if "dir" in given:
        if given["dir"] in ("asc", "desc"):
            query.descending = given["dir"] == "desc"
        else:
            problems.append(("dir", "asc or desc"))
    if "page" in given:
        try:
            query.page = int(given["page"])
            if query.page < 1:
                raise ValueError
        except ValueError:
            problems.append(("page", "a whole number from 1"))
    if problems:
        raise InvalidInput(problems)
    return query


@dataclass
class TablePage:
    query: TableQuery
    rows: list[ShotRow]
    total: int
    page: int
    pages: int
    page_size: int
    value_columns: tuple[str, ...]
    live_cursor: int

    @property
    def first_index(self) -> int:
        return (self.page - 1) * self.page_size + 1 if self.total else 0

    @property
    def last_index(self) -> int:
        return min(self.page * self.page_size, self.total)


def table_page(session: Session, campaign: Campaign, query: TableQuery) -> TablePage:
    total = store.count_shots(session, campaign.id, query.filter)
    pages = max(1, -(-total // TABLE_PAGE_SIZE))
    page = min(query.page, pages)
    rows = store.shot_page(
        session,
        campaign.id,
        query.filter,
        sort=query.sort,
        descending=query.descending,
        offset=(page - 1) * TABLE_PAGE_SIZE,
        limit=TABLE_PAGE_SIZE,
        value_columns=TABLE_VALUE_COLUMNS,
    )
    return TablePage(
        query,
        rows,
        total,
        page,
        pages,
        TABLE_PAGE_SIZE,
        TABLE_VALUE_COLUMNS,
        store.latest_shot_pk(session, campaign.id),
    )


# --------------------------------------------------------------------------- CSV


def _order(query: TableQuery) -> tuple[Any, Any]:
    key = store.SORT_COLUMNS[query.sort]
    if query.descending:
        return key.desc(), Shot.id.desc()
    return key.asc(), Shot.id.asc()


def csv_chunks(session: Session, campaign: Campaign, query: TableQuery) -> Iterator[list[CsvColumn]]:
    """The filtered set as the export table (``app.services.export_table``), every row,
    in the table's order, a chunk at a time (memory stays flat). Asked to list excluded
    shots, it carries their ``excluded_at`` and ``excluded_reason``."""
    zone = campaign_zone(campaign.timezone)
    conditions = query.filter.conditions(campaign.id)
    exclusion = query.filter.excluded != "omit"
    # The other sections' columns must be known before the header is written.
    extra = extra_paths(export_store.iter_payloads(session, conditions))
    stmt = export_store.shot_rows_query(conditions, _order(query), payloads=True, exclusion=exclusion)
    for columns in export_store.iter_shot_rows(session, stmt):
        flags = export_store.fetch_flags_of(session, columns["shot_pk"])
        yield csv_columns(ShotTable.from_columns(columns, flags), zone, extra, exclusion=exclusion)


# --------------------------------------------------------------------- table columns


@dataclass(frozen=True)
class Column:
    name: str
    label: str
    full_label: str


def table_columns() -> list[Column]:
    return [Column(name, short_label(name), field_label(name)) for name in TABLE_VALUE_COLUMNS]
