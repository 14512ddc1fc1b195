"""The invented demo campaign: realistic regimes, every flag, deterministic, invented names only.

Everything here checks invented demo data against the project's own model; no outside
reference is involved.
"""

from __future__ import annotations

import json
import math
import re
from collections import Counter
from datetime import datetime, time
from zoneinfo import ZoneInfo

import numpy as np
import pytest

import model
from seed_demo import scenario
from seed_demo.generator import demo_campaign_spec, generate_demo_shots


def _columns(payloads: list[dict]) -> dict[str, np.ndarray]:
    """model.evaluate_table columns (dotted paths), the model's defaults where a value is absent."""
    columns = {}
    for spec in model.INPUT_FIELDS:
        section, key = spec.path.split(".")
        values = [(p.get(section) or {}).get(key, spec.default) for p in payloads]
        if spec.kind == "enum":
            columns[spec.path] = np.array(values, dtype=object)
        else:
            columns[spec.path] = np.array([np.nan if v is None else float(v) for v in values])
    return columns


@pytest.fixture(scope="module")
def shots() -> list[dict]:
    return generate_demo_shots()


@pytest.fixture(scope="module")
def evaluated(shots) -> dict[str, np.ndarray]:
    return model.evaluate_table(_columns(shots))


def _local(shot: dict) -> datetime:
    taken = datetime.fromisoformat(shot["taken_at"].replace("Z", "+00:00"))
    return taken.astimezone(ZoneInfo(scenario.CAMPAIGN_TIMEZONE))


def test_demo_has_about_three_thousand_shots_with_unique_ids(shots):
    assert 2700 <= len(shots) <= 3300
    assert len({s["shot_id"] for s in shots}) == len(shots)


def test_same_seed_gives_the_same_payloads_and_another_seed_does_not(shots):
    again = generate_demo_shots(scenario.DEMO_SEED)
    assert json.dumps(again, sort_keys=True) == json.dumps(shots, sort_keys=True)
    other = generate_demo_shots(scenario.DEMO_SEED + 1)
    assert json.dumps(other, sort_keys=True) != json.dumps(shots, sort_keys=True)


def test_every_demo_payload_passes_the_model_validation(shots):
    for shot in shots:
        model.validate_shot(shot)  # raises ShotInputError naming the field otherwise


def test_payloads_are_plain_json_with_utc_times_in_order(shots):
    text = json.dumps(shots, allow_nan=False)  # no NaN or numpy types
    assert "NaN" not in text
    times = [s["taken_at"] for s in shots]
    assert all(t.endswith("Z") for t in times)
    assert times == sorted(times)


def test_status_shares_look_like_a_real_campaign(evaluated):
    status = Counter(model.STATUSES[rank] for rank in evaluated["status"].tolist())
    n = sum(status.values())
    assert 0.70 <= status["nominal"] / n <= 0.80, status
    assert 0.10 <= status["marginal"] / n <= 0.20, status
    assert 0.05 <= status["outside"] / n <= 0.15, status


def test_every_flag_code_fires_at_least_once(evaluated):
    silent = [code for code in model.FLAG_CODES if not np.any(evaluated[f"flag.{code}"])]
    assert silent == []


def test_shots_fall_in_the_three_campaign_weeks_and_the_last_one_is_the_current_week(shots):
    weeks = Counter("{}-W{:02d}".format(*_local(s).isocalendar()[:2]) for s in shots)
    assert set(weeks) == set(scenario.CAMPAIGN_WEEKS)
    assert weeks[scenario.CURRENT_WEEK] > 500
    # Also in UTC every shot stays in its local ISO week (no beam on Sundays).
    utc_weeks = Counter(
        "{}-W{:02d}".format(*datetime.fromisoformat(s["taken_at"].replace("Z", "+00:00")).isocalendar()[:2])
        for s in shots
    )
    assert utc_weeks == weeks


def test_shots_are_taken_only_during_shifts_and_never_on_sunday(shots):
    earliest, latest = time(6, 0), time(22, 0)
    for shot in shots:
        local = _local(shot)
        assert earliest <= local.time() < latest, shot["shot_id"]
        assert local.isoweekday() != 7, shot["shot_id"]


def test_the_density_calibration_drift_shows_as_a_growing_frequency_mismatch(shots, evaluated):
    mismatch = evaluated["frequency_mismatch_pct"]
    days = np.array([_local(s).date().isoformat() for s in shots])
    first_week = (days < "2026-11-16") & np.isfinite(mismatch)
    last_day = (days == "2026-11-28") & np.isfinite(mismatch)
    assert np.nanmedian(np.abs(mismatch[first_week])) < 0.5
    assert np.nanmedian(mismatch[last_day]) > 2.0
    assert np.any(evaluated["flag.DENSITY_MISMATCH"][last_day] == model.SEVERITY_BY_RANK.index("outside"))


def test_phase_jitter_follows_the_density_jitter(shots, evaluated):
    # MODEL.md section 5: a 1 % density change moves the phase by phase_per_pct_density_rad.
    production = np.array(
        [
            s["tags"][0] == "production"
            and _local(s).date().isoformat() < "2026-11-16"
            and "modulation_phase_rad" in s.get("measured", {})
            for s in shots
        ]
    )
    phases = np.array([s["measured"]["modulation_phase_rad"] for s, p in zip(shots, production, strict=False) if p])
    per_pct = float(np.median(evaluated["phase_per_pct_density_rad"][production]))
    expected = math.hypot(per_pct * 100 * scenario.JITTER["true_density"], scenario.PHASE_RESOLUTION_RAD)
    assert phases.std() == pytest.approx(expected, rel=0.2)


def test_some_shots_are_seeded_by_an_electron_bunch_and_some_unseeded(shots):
    methods = Counter((s.get("seed") or {}).get("method", "none") for s in shots)
    assert methods["electron_bunch"] >= 50
    assert 20 <= methods["none"] <= 150
    assert any("seed" not in s for s in shots)  # the default (unseeded) is exercised too


def test_diagnostics_and_unknown_fields_are_present(shots):
    measured = Counter(k for s in shots for k in s.get("measured", {}))
    for key in (
        "modulation_freq_ghz",
        "modulation_phase_rad",
        "microbunch_count",
        "halo_radius_mm",
        "witness_energy_mev",
    ):
        assert measured[key] > 100, key
    assert all("daq" in s for s in shots)  # not a model input: kept verbatim by ingest


def test_some_notes_carry_markup_to_exercise_escaping(shots):
    notes = [s["notes"] for s in shots]
    assert any("<b>check BPM</b>" in n for n in notes)
    assert any("&" in n for n in notes)
    assert sum(1 for n in notes if n) > 50


# Words with capitals allowed in the demo text: the invented names, the facility name,
# the time zone (a real IANA zone: the clock, not a place of the scenario), the crew
# letters and abbreviations of the trade.
_TRADE_ABBREVIATIONS = {"BPM", "OTR", "DAQ", "ISO", "W"}


def _allowed_words() -> set[str]:
    words = set(scenario.INVENTED_NAMES) | _TRADE_ABBREVIATIONS | set(scenario.CREWS)
    words |= set(re.findall(r"[A-Za-z]+", scenario.FACILITY_NAME))
    words |= set(re.findall(r"[A-Za-z]+", scenario.CAMPAIGN_TIMEZONE))
    words.add("Invented")  # the description's first word
    return words


def test_the_demo_uses_only_invented_names(shots):
    spec = demo_campaign_spec()
    texts = [spec["name"], spec["description"], spec["slug"]]
    for shot in shots:
        texts += [shot["shot_id"], shot["notes"], *shot["tags"], json.dumps(shot["daq"])]
    capitalised = {w for t in texts for w in re.findall(r"[A-Za-z]+", t) if any(c.isupper() for c in w)}
    assert capitalised <= _allowed_words(), capitalised - _allowed_words()
    assert all(name in spec["name"] + spec["description"] for name in scenario.INVENTED_NAMES)
