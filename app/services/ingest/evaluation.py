"""Evaluating shots and turning the model's table into evaluation and flag rows.

The model returns status and severity ranks (int8) and NaN for absent outputs; the
rows carry text and None (``app.plain``), as the store keeps them.
"""

from __future__ import annotations

import time
from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any

import numpy as np

import model
from app.plain import float_list
from app.services import metrics

_SEVERITY_NAMES = np.array(model.SEVERITY_BY_RANK, dtype=object)  # rank -> name, by fancy indexing


def model_columns(stored: Mapping[str, Sequence[Any]]) -> dict[str, np.ndarray]:
    """Dotted-path model columns from stored shot input columns (``model.column_name``)."""
    columns: dict[str, np.ndarray] = {}
    for f in model.INPUT_FIELDS:
        values = list(stored[model.column_name(f.path)])
        if f.kind == "enum":
            array = np.empty(len(values), dtype=object)
            array[:] = values
            columns[f.path] = array
        else:
            columns[f.path] = np.array(values, dtype=float)  # None reads as NaN
    return columns


def evaluate_inputs(
    inputs: Mapping[str, np.ndarray], overrides: Mapping[str, Any], mode: str
) -> Mapping[str, np.ndarray]:
    """model.evaluate_table over dotted-path input columns, timed for /metrics."""
    start = time.perf_counter()
    table = model.evaluate_table(inputs, overrides)
    metrics.EVALUATION_SECONDS.observe(time.perf_counter() - start, mode=mode)
    metrics.EVALUATION_SHOTS.inc(len(next(iter(inputs.values()), [])), mode=mode)
    return table


def evaluation_columns(
    table: Mapping[str, np.ndarray],
    shot_pks: Sequence[int],
    campaign_id: int,
    settings_version: int,
    now: datetime,
    defaulted: Sequence[list[str]] | None = None,
) -> tuple[dict[str, list[Any]], dict[str, list[Any]]]:
    """Evaluation and flag table columns for the table's shots (in order).

    ``defaulted`` lists, per shot, the input fields that took their defaults; without it
    (a re-evaluation of stored inputs) the stored lists are left as they are.
    """
    n = len(shot_pks)
    evals: dict[str, list[Any]] = {name: float_list(table[name]) for name in model.OUTPUT_NAMES}
    evals.update(
        shot_pk=list(shot_pks),
        campaign_id=[campaign_id] * n,
        model_version=[model.MODEL_VERSION] * n,
        settings_version=[settings_version] * n,
        evaluated_at=[now] * n,
        status=[model.STATUSES[rank] for rank in table["status"].tolist()],
    )
    if defaulted is not None:
        evals["defaulted_fields"] = [list(d) for d in defaulted]
    names = ("shot_pk", "campaign_id", "code", "severity", "value", "limit_value", "message")
    flags: dict[str, list[Any]] = {k: [] for k in names}
    pks = np.asarray(shot_pks)
    # Flag rows are written rule by rule (in shot order within a rule), whole columns at a time.
    for code in model.FLAG_CODES:
        ranks = table[f"flag.{code}"]
        fired = np.flatnonzero(ranks)
        if fired.size == 0:
            continue
        severities = _SEVERITY_NAMES[ranks[fired]].tolist()
        values = float_list(table[f"flag_value.{code}"][fired])
        limits = float_list(table[f"flag_limit.{code}"][fired])
        flags["shot_pk"] += pks[fired].tolist()
        flags["code"] += [code] * fired.size
        flags["severity"] += severities
        flags["value"] += values
        flags["limit_value"] += limits
        flags["message"] += model.flag_messages(code, severities, values, limits)
    flags["campaign_id"] = [campaign_id] * len(flags["shot_pk"])
    return evals, flags


def as_rows(columns: Mapping[str, Sequence[Any]]) -> list[dict[str, Any]]:
    names = list(columns)
    return [dict(zip(names, values, strict=True)) for values in zip(*columns.values(), strict=True)]


def evaluation_rows(
    table: Mapping[str, np.ndarray],
    shot_pks: Sequence[int],
    campaign_id: int,
    settings_version: int,
    now: datetime,
    defaulted: Sequence[list[str]] | None = None,
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Evaluation rows and flag rows for the table's shots (in order)."""
    evals, flags = evaluation_columns(table, shot_pks, campaign_id, settings_version, now, defaulted)
    return as_rows(evals), as_rows(flags)
