"""The import's report as lines for the terminal: columns ignored, every failing row with
its field (and the file column behind it), every conflict, and the one-line summary."""

from __future__ import annotations

from collections.abc import Iterator, Sequence

from app.services.backlog_import.columns import ColumnPlan
from app.services.backlog_import.importing import ImportReport

_LISTED = 8


def _listed(names: Sequence[str]) -> str:
    more = f" and {len(names) - _LISTED} more" if len(names) > _LISTED else ""
    return ", ".join(names[:_LISTED]) + more


def summary_line(report: ImportReport) -> str:
    counts = (
        f"stored {report.stored}, unchanged {report.unchanged}, conflicts {len(report.conflicts)}, "
        f"failed {report.failed} (of {report.rows} rows)"
    )
    if report.dry_run:
        return f"dry run, nothing stored: would store {report.stored}, " + counts.split(", ", 1)[1]
    return f"{report.campaign}: {counts}"


def lines(report: ImportReport, plan: ColumnPlan) -> Iterator[str]:
    if plan.ignored:
        listed = _listed(plan.ignored)
        yield f"ignored {len(plan.ignored)} column(s) that wakeledger derives or the map leaves out: {listed}"
    for p in report.problems:
        column = f" (column {p.column!r})" if p.column and p.column != p.field else ""
        field = "" if p.field == "(row)" else f"{p.field}{column}: "
        yield f"row {p.row}: {field}{p.reason}"
    for c in report.conflicts:
        yield (
            f"row {c.row}: conflict: shot {c.shot_id!r} differs from {c.against} in {_listed(c.fields)}; "
            "nothing overwritten"
        )
    if report.conflicts:
        yield "a conflicting row is left as stored; change a stored shot with PUT .../shots/{shot_id}?reason=..."
    yield summary_line(report)
