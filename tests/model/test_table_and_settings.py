"""evaluate_table over many mixed shots equals a loop of evaluate_shot; campaign settings and their errors."""

from __future__ import annotations

import math

import numpy as np
import pytest

from model import (
    DEFAULT_SETTINGS,
    FLAG_CODES,
    MODEL_VERSION,
    OUTPUT_NAMES,
    SEVERITY_BY_RANK,
    STATUSES,
    SettingsError,
    evaluate_shot,
    evaluate_table,
    flag_message,
    flag_messages,
    resolve_settings,
    validate_columns,
)
from model.evaluate import _CHUNK
from model.rules import ABS_METRIC_CODES, RULES_BY_CODE

EXAMPLE = {
    "driver": {
        "species": "proton",
        "momentum_gev": 400,
        "population": 3e11,
        "sigma_z_mm": 80,
        "sigma_r_mm": 0.2,
        "emittance_n_mm_mrad": 3.0,
        "offset_x_mm": 0.01,
    },
    "plasma": {"density_cm3": 7e14, "length_m": 10, "ion_mass_amu": 85.47, "gradient_pct_per_m": 0.1},
    "seed": {"method": "ionization_front", "position_mm": 5},
}


def mixed_shots(n=300, seed=7):
    """Invented shots over all species and seed methods (demo data, no real machine)."""
    rng = np.random.default_rng(seed)
    shots = []
    for i in range(n):
        species = ["proton", "electron", "positron", "ion"][i % 4]
        method = ["ionization_front", "electron_bunch", "none"][(i // 4) % 3]
        sigma_z = float(rng.uniform(5, 150))
        driver = {
            "species": species,
            "momentum_gev": float(10 ** rng.uniform(0, 3.5)),
            "population": float(10 ** rng.uniform(9, 12)),
            "sigma_z_mm": sigma_z,
            "sigma_r_mm": float(rng.uniform(0.05, 1.0)),
            "emittance_n_mm_mrad": float(rng.choice([0.0, rng.uniform(0.5, 10)])),
            "offset_x_mm": float(rng.normal(0, 0.05)),
            "angle_y_mrad": float(rng.normal(0, 0.02)),
        }
        if species == "ion":
            driver |= {"mass_amu": 207.2, "charge_state": int(rng.integers(1, 40))}
        seed_block = {"method": method}
        if method != "none":
            seed_block["position_mm"] = float(rng.uniform(-2, 2) * sigma_z)
        if method == "electron_bunch":
            seed_block |= {
                "electron_charge_pc": float(rng.uniform(10, 800)),
                "electron_sigma_z_mm": float(rng.uniform(0.05, 1.0)),
                "electron_sigma_r_mm": float(rng.uniform(0.05, 0.5)),
            }
        shot = {
            "driver": driver,
            "plasma": {
                "density_cm3": float(10 ** rng.uniform(13, 16)),
                "length_m": float(rng.uniform(1, 20)),
                "gradient_pct_per_m": float(rng.normal(0, 0.5)),
                "ion_mass_amu": 39.948,
            },
            "seed": seed_block,
        }
        if i % 3 == 0:
            shot["measured"] = {"modulation_freq_ghz": float(rng.uniform(50, 500))}
        shots.append(shot)
    return shots


def to_columns(shots):
    paths = sorted(
        {f"{s}.{k}" for shot in shots for s in ("driver", "plasma", "seed", "measured") for k in shot.get(s, {})}
    )
    columns = {}
    for path in paths:
        section, name = path.split(".")
        values = [shot.get(section, {}).get(name) for shot in shots]
        if path in ("driver.species", "seed.method"):
            columns[path] = np.array(values)
        else:
            columns[path] = np.array([math.nan if v is None else v for v in values], dtype=float)
    return columns


def assert_table_row_equals_shot(table, i, one):
    for name in OUTPUT_NAMES:
        got = table[name][i]
        assert (one[name] is None and np.isnan(got)) or got == one[name], (i, name, got, one[name])
    assert STATUSES[table["status"][i]] == one["status"]
    fired = {f["code"]: f for f in one["flags"]}
    for code in FLAG_CODES:
        assert SEVERITY_BY_RANK[table[f"flag.{code}"][i]] == fired.get(code, {}).get("severity", "")


def test_vectorised_table_with_mixed_species_and_seed_methods_equals_a_loop_of_evaluate_shot():
    shots = mixed_shots()
    table = evaluate_table(to_columns(shots))
    assert all(table[name].shape == (len(shots),) for name in OUTPUT_NAMES)
    for i, shot in enumerate(shots):
        assert_table_row_equals_shot(table, i, evaluate_shot(shot))


def test_table_longer_than_one_processing_chunk_equals_a_loop():
    shots = mixed_shots(n=120, seed=3)
    columns = {path: np.tile(values, 334) for path, values in to_columns(shots).items()}  # 40080 rows
    table = evaluate_table(columns)
    for i in (0, 1, _CHUNK - 1, _CHUNK, _CHUNK + 1, 32767, 32768, 32769, 40079):
        assert_table_row_equals_shot(table, i, evaluate_shot(shots[i % 120]))


def test_table_outputs_have_the_promised_keys_and_types():
    table = evaluate_table(to_columns(mixed_shots(n=12)))
    expected = set(OUTPUT_NAMES) | {"status"}
    expected |= {f"{kind}.{code}" for kind in ("flag", "flag_value", "flag_limit") for code in FLAG_CODES}
    assert set(table) == expected
    # Statuses and severities are small integer ranks (text only at the edge).
    assert table["status"].dtype == np.int8 and table["flag.UNSEEDED"].dtype == np.int8
    assert set(np.unique(table["status"])) <= {0, 1, 2} and set(np.unique(table["flag.UNSEEDED"])) <= {0, 2}
    assert table["efolds_exit"].dtype == np.float64


def test_model_version_and_output_order_are_published():
    assert isinstance(MODEL_VERSION, str) and MODEL_VERSION
    assert OUTPUT_NAMES[0] == "plasma_frequency_ghz" and OUTPUT_NAMES[-2:] == (
        "frequency_mismatch_pct",
        "implied_density_cm3",
    )
    assert len(OUTPUT_NAMES) == 32
    assert FLAG_CODES[0] == "BUNCH_NOT_LONG" and FLAG_CODES[-1] == "ASYMPTOTIC_LIMIT"


def test_campaign_limit_override_changes_the_flag_and_its_reported_limit():
    shot = {**EXAMPLE, "seed": {"method": "ionization_front", "position_mm": 5}}
    base = evaluate_shot(shot)
    strict = evaluate_shot(shot, {"limits": {"WEAK_SEED": {"marginal": 1e6, "outside": 1e5}}})
    flag = {f["code"]: f for f in strict["flags"]}["WEAK_SEED"]
    assert flag["severity"] == "outside" and flag["limit"] == 1e5 and flag["value"] == base["seed_to_noise_efolds"]
    assert strict["status"] == "outside"
    assert flag["message"].endswith(".") and "1e+05" in flag["message"]


def test_model_settings_change_the_outputs():
    base = evaluate_shot(EXAMPLE)
    later = evaluate_shot(EXAMPLE, {"reference_slice_sigma": 2.0})
    assert later["phase_per_pct_density_rad"] == pytest.approx(2 * base["phase_per_pct_density_rad"])
    loose = evaluate_shot(EXAMPLE, {"phase_tolerance_rad": 2 * DEFAULT_SETTINGS["phase_tolerance_rad"]})
    assert loose["density_tolerance_pct"] == pytest.approx(2 * base["density_tolerance_pct"])


def test_default_settings_are_not_changed_by_overrides():
    before = repr(DEFAULT_SETTINGS)
    resolve_settings({"noise_floor": 1e-2, "limits": {"ION_MOTION": {"marginal": 0.5}}})
    assert repr(DEFAULT_SETTINGS) == before


@pytest.mark.parametrize(
    "settings, words",
    [
        ({"noise_flor": 1e-3}, "unknown setting 'noise_flor'"),
        ({"limits": {"NOT_A_RULE": {"marginal": 1}}}, "unknown rule code 'NOT_A_RULE'"),
        ({"limits": {"WEAK_SEED": {"warning": 1}}}, "unknown limit 'warning' for WEAK_SEED"),
        ({"limits": {"WEAK_SEED": {"marginal": "4"}}}, "must be a finite number"),
        ({"saturation_modulation": math.nan}, "must be a finite number"),
        ({"reference_slice_sigma": 0}, "must be > 0"),
        ({"noise_floor": -1e-3}, "must be >= 0"),
        ({"limits": {"BEAM_TOO_WIDE": {"marginal": 5.0}}}, "out of order"),
        ({"limits": {"WEAK_SEED": {"outside": 5.0}}}, "out of order"),
        ({"limits": {"UNSEEDED": {"marginal": 1}}}, "unknown rule code 'UNSEEDED'"),
    ],
)
def test_bad_settings_raise_a_settings_error_that_says_what_is_wrong(settings, words):
    with pytest.raises(SettingsError) as caught:
        evaluate_shot(EXAMPLE, settings)
    assert words in str(caught.value)


def test_a_settings_error_names_each_bad_setting_by_its_path():
    with pytest.raises(SettingsError) as caught:
        resolve_settings(
            {"noise_floor": "x", "limits": {"WEAK_SEED": {"outside": 5.0}, "ION_MOTION": {"marginal": math.inf}}}
        )
    paths = [path for path, _ in caught.value.problems]
    assert paths == ["noise_floor", "limits.ION_MOTION.marginal", "limits.WEAK_SEED"]


def test_validated_columns_pass_through_evaluate_table_unchecked_and_cannot_be_changed():
    # validate once: the ingest path validates, then evaluates the same validated columns
    columns = to_columns(mixed_shots(n=50, seed=11))
    clean = validate_columns(columns)
    assert validate_columns(clean) is clean
    with pytest.raises(ValueError):
        clean["plasma.density_cm3"][0] = -1.0
    table, again = evaluate_table(clean), evaluate_table(columns)
    for name, values in table.items():
        np.testing.assert_array_equal(values, again[name])


def test_flag_values_and_limits_are_the_metric_and_the_limit_crossed_where_a_flag_fired_and_nan_elsewhere():
    # issue: flag_value.<CODE> and flag_limit.<CODE> follow from the outputs and the ranks, so the table builds them
    # only when read; whoever reads them (the store, the exports, the planner) gets the same numbers as before
    settings = {"limits": {"WEAK_SEED": {"marginal": 6.0, "outside": 1.0}, "ASYMPTOTIC_LIMIT": {"info": 0.5}}}
    limits = resolve_settings(settings)["limits"]
    table = evaluate_table(to_columns(mixed_shots(n=240, seed=5)), settings)
    for code in FLAG_CODES:
        rank, value, limit = table[f"flag.{code}"], table[f"flag_value.{code}"], table[f"flag_limit.{code}"]
        fired = rank > 0
        assert value.dtype == limit.dtype == np.float64 and value.shape == rank.shape
        assert np.isnan(value[~fired]).all() and np.isnan(limit[~fired]).all()
        if code == "UNSEEDED":  # no metric, no limit
            assert np.isnan(value).all() and np.isnan(limit).all()
            continue
        rule = RULES_BY_CODE[code]
        metric = np.abs(table[rule.metric]) if code in ABS_METRIC_CODES else table[rule.metric]
        np.testing.assert_array_equal(value[fired], metric[fired])
        crossed = [
            limits[code]["outside"] if r == 3 else limits[code].get("marginal", limits[code].get("info"))
            for r in rank[fired]
        ]
        np.testing.assert_array_equal(limit[fired], np.array(crossed, dtype=float))
        assert table[f"flag_value.{code}"] is value  # built once, then kept
    fired_somewhere = {code for code in FLAG_CODES if table[f"flag.{code}"].any()}
    assert {"WEAK_SEED", "UNSEEDED", "BEAM_TOO_WIDE"} <= fired_somewhere


def test_table_is_a_read_only_mapping_with_the_keys_in_the_order_they_always_had():
    table = evaluate_table(to_columns(mixed_shots(n=12)))
    codes = [c for c in FLAG_CODES if c not in ("UNSEEDED", "ASYMPTOTIC_LIMIT")] + ["ASYMPTOTIC_LIMIT", "UNSEEDED"]
    assert list(table) == [
        *OUTPUT_NAMES,
        *(f"flag_value.{c}" for c in codes),
        *(f"flag_limit.{c}" for c in codes),
        *(f"flag.{c}" for c in codes),
        "status",
    ]
    assert len(table) == len(list(table)) and "flag_value.WEAK_SEED" in table and "flag_value.NOPE" not in table
    with pytest.raises(KeyError):
        table["flag_value.NOPE"]
    with pytest.raises(TypeError):
        table["status"] = np.zeros(12)  # type: ignore[index]
    copied = dict(table)
    assert list(copied) == list(table) and all(copied[key] is table[key] for key in table)


def test_density_scale_is_a_model_setting_shown_with_the_others():
    # the settings form and the API list DEFAULT_SETTINGS; density_scale calibrates the logged density (MODEL.md 2)
    assert DEFAULT_SETTINGS["density_scale"] == 1.0
    assert [k for k in DEFAULT_SETTINGS if k != "limits"] == [
        "reference_slice_sigma",
        "noise_floor",
        "phase_tolerance_rad",
        "saturation_modulation",
        "density_scale",
    ]
    assert DEFAULT_SETTINGS["limits"]["SLOW_DRIVER"] == {"marginal": 10.0, "outside": 3.0}


def test_a_fired_flag_reads_the_metric_its_value_and_the_limit_crossed_to_three_digits():
    assert flag_message("BEAM_TOO_WIDE", "marginal", 1.23456, 1.0) == (
        "The beam is too wide compared with the plasma skin depth: k_p sigma_r is 1.23, above the marginal limit 1."
    )
    assert flag_message("BEAM_TOO_WIDE", "marginal", None, 1.0) == (
        "The beam is too wide compared with the plasma skin depth."
    )


def test_the_messages_of_many_flags_of_one_rule_read_as_each_flag_alone():
    severities = ["marginal", "outside", "marginal", "info", "outside", "marginal", "marginal", "outside"]
    values = [1.23456, 2.5, 1.1, 0.7, None, 0.001, 3.0, -0.0]
    limits = [1.0, 2.0, 1.0, 0.5, 2.0, 0.0, -0.0, None]
    for code in FLAG_CODES:
        expected = [flag_message(code, s, v, lim) for s, v, lim in zip(severities, values, limits, strict=True)]
        assert flag_messages(code, severities, values, limits) == expected
    # 0.0 and -0.0 compare equal but read differently: each limit keeps its own text
    zero, minus_zero = flag_messages("BEAM_TOO_WIDE", ["marginal"] * 2, [3.0, 3.0], [0.0, -0.0])
    assert zero.endswith("limit 0.") and minus_zero.endswith("limit -0.")
