"""Bad shot input is refused with ShotInputError naming every failing field and why (MODEL.md section 1)."""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest

from model import INPUT_FIELDS, ShotInputError, evaluate_shot, evaluate_table, validate_columns, validate_shot

GOOD = {
    "shot_id": "demo-001",
    "driver": {"species": "proton", "momentum_gev": 400, "population": 3e11, "sigma_z_mm": 80, "sigma_r_mm": 0.2},
    "plasma": {"density_cm3": 7e14, "length_m": 10, "ion_mass_amu": 85.47},
    "seed": {"method": "ionization_front", "position_mm": 10},
}


def shot_with(changes=None, drop=()):
    shot = copy.deepcopy(GOOD)
    for path, value in (changes or {}).items():
        section, name = path.split(".")
        shot.setdefault(section, {})[name] = value
    for path in drop:
        section, name = path.split(".")
        shot[section].pop(name)
    return shot


def problems_of(shot):
    with pytest.raises(ShotInputError) as caught:
        validate_shot(shot)
    return dict(caught.value.problems), str(caught.value)


def test_good_shot_validates_and_gets_its_defaults_filled_without_losing_unknown_fields():
    shot = shot_with({"driver.bunch_colour": "blue"})
    shot["operator_note"] = {"kept": True}
    normalised = validate_shot(shot)
    assert normalised["driver"]["emittance_n_mm_mrad"] == 0.0
    assert normalised["plasma"]["gradient_pct_per_m"] == 0.0 and normalised["plasma"]["ion_charge"] == 1.0
    assert normalised["driver"]["bunch_colour"] == "blue" and normalised["operator_note"] == {"kept": True}
    assert shot["driver"].get("emittance_n_mm_mrad") is None  # the caller's shot is not modified


def test_shot_without_seed_block_is_unseeded():
    shot = shot_with()
    del shot["seed"]
    assert validate_shot(shot)["seed"]["method"] == "none"


def test_missing_required_field_is_named_as_missing():
    problems, message = problems_of(shot_with(drop=["driver.sigma_z_mm"]))
    assert problems == {"driver.sigma_z_mm": "missing"}
    assert "driver.sigma_z_mm" in message


def test_negative_density_is_out_of_range_and_the_reason_gives_the_range():
    problems, _ = problems_of(shot_with({"plasma.density_cm3": -1.0}))
    assert (
        problems["plasma.density_cm3"].startswith("out of range") and "1e+10 to 1e+20" in problems["plasma.density_cm3"]
    )


@pytest.mark.parametrize("huge", [10**400, -(10**400)])
def test_an_integer_beyond_float_range_is_out_of_range_not_a_crash(huge):
    problems, _ = problems_of(shot_with({"driver.population": huge}))
    assert problems["driver.population"].startswith("out of range")


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_nan_and_infinity_are_rejected_even_in_optional_fields(bad):
    problems, _ = problems_of(shot_with({"driver.offset_x_mm": bad, "measured.halo_radius_mm": bad}))
    assert set(problems) == {"driver.offset_x_mm", "measured.halo_radius_mm"}
    assert all("NaN or infinity" in reason for reason in problems.values())


@pytest.mark.parametrize("bad", ["7e14", True, [1], {"v": 1}])
def test_text_booleans_and_lists_are_not_numbers(bad):
    problems, _ = problems_of(shot_with({"plasma.density_cm3": bad}))
    assert problems == {"plasma.density_cm3": "not a number"}


def test_unknown_species_is_named():
    problems, _ = problems_of(shot_with({"driver.species": "muon"}))
    assert "unknown species 'muon'" in problems["driver.species"]


def test_unknown_seed_method_is_named():
    problems, _ = problems_of(shot_with({"seed.method": "laser"}))
    assert "unknown seed method 'laser'" in problems["seed.method"]


def test_seed_position_beyond_ten_sigma_z_is_out_of_range():
    problems, _ = problems_of(shot_with({"seed.position_mm": 801}))
    assert "beyond 10 sigma_z" in problems["seed.position_mm"]
    validate_shot(shot_with({"seed.position_mm": -800}))


def test_seeded_shot_needs_a_seed_position():
    problems, _ = problems_of(shot_with(drop=["seed.position_mm"]))
    assert problems == {"seed.position_mm": "missing (needed for seed methods ionization_front and electron_bunch)"}


def test_seed_fields_without_a_method_are_refused_rather_than_read_as_unseeded():
    problems, _ = problems_of(shot_with(drop=["seed.method"]))
    assert "seed.method" in problems


def test_ion_driver_needs_mass_and_charge_state():
    problems, _ = problems_of(shot_with({"driver.species": "ion"}))
    assert set(problems) == {"driver.mass_amu", "driver.charge_state"}
    assert all("needed for species ion" in r for r in problems.values())
    problems, _ = problems_of(
        shot_with({"driver.species": "ion", "driver.mass_amu": 207.2, "driver.charge_state": 0.5})
    )
    assert problems == {"driver.charge_state": "out of range (must be a non-zero integer)"}


def test_electron_bunch_seed_needs_its_bunch_fields():
    problems, _ = problems_of(shot_with({"seed.method": "electron_bunch"}))
    assert set(problems) == {"seed.electron_charge_pc", "seed.electron_sigma_z_mm", "seed.electron_sigma_r_mm"}
    assert all("needed for seed method electron_bunch" in r for r in problems.values())


def test_every_failing_field_is_listed_at_once_in_table_order():
    shot = shot_with(
        {
            "driver.species": "muon",
            "driver.momentum_gev": 0.0,
            "plasma.length_m": math.nan,
            "plasma.ion_charge": 0,
            "measured.modulation_freq_ghz": -3,
        }
    )
    del shot["driver"]["population"]
    problems, message = problems_of(shot)
    expected = [
        "driver.species",
        "driver.momentum_gev",
        "driver.population",
        "plasma.length_m",
        "plasma.ion_charge",
        "measured.modulation_freq_ghz",
    ]
    assert list(problems) == expected
    assert all(path in message for path in expected)


def test_a_section_that_is_not_an_object_is_named():
    shot = shot_with()
    shot["plasma"] = [1, 2]
    problems, _ = problems_of(shot)
    assert problems["plasma"] == "not an object"


def test_evaluate_shot_refuses_bad_input_the_same_way():
    with pytest.raises(ShotInputError) as caught:
        evaluate_shot(shot_with({"plasma.density_cm3": -1.0}))
    assert caught.value.problems[0][0] == "plasma.density_cm3"


def test_table_validation_names_the_column_and_the_first_offending_rows():
    n = 10
    columns = {f"driver.{k}": np.full(n, v, dtype=float) for k, v in GOOD["driver"].items() if k != "species"}
    columns |= {f"plasma.{k}": np.full(n, v, dtype=float) for k, v in GOOD["plasma"].items()}
    columns["driver.species"] = np.array(["proton"] * n)
    columns["seed.method"] = np.array(["none"] * n)
    columns["plasma.density_cm3"][[2, 7]] = -5.0
    columns["driver.sigma_r_mm"][4] = np.inf
    columns["driver.species"][9] = "muon"
    with pytest.raises(ShotInputError) as caught:
        evaluate_table(columns)
    problems = dict(caught.value.problems)
    assert problems["plasma.density_cm3"].endswith("at rows 2, 7")
    assert "at rows 4" in problems["driver.sigma_r_mm"] and "infinity" in problems["driver.sigma_r_mm"]
    assert "unknown species 'muon'" in problems["driver.species"] and problems["driver.species"].endswith("at rows 9")


def test_table_nan_cells_mean_absent_so_required_ones_are_missing():
    columns = {"driver.species": ["proton", "proton"], "driver.momentum_gev": [400.0, np.nan]}
    with pytest.raises(ShotInputError) as caught:
        evaluate_table(columns)
    problems = dict(caught.value.problems)
    assert problems["driver.momentum_gev"] == "missing at rows 1"
    assert problems["driver.population"] == "missing at rows 0, 1"


def test_input_fields_table_describes_every_section_one_field():
    paths = [f.path for f in INPUT_FIELDS]
    assert len(paths) == len(set(paths)) == 27
    by_path = {f.path: f for f in INPUT_FIELDS}
    assert by_path["plasma.density_cm3"].unit == "cm^-3" and by_path["plasma.density_cm3"].required
    assert by_path["driver.emittance_n_mm_mrad"].default == 0.0
    assert by_path["seed.method"].choices == ("ionization_front", "electron_bunch", "none")


def test_columns_built_from_api_payloads_can_refuse_nan_instead_of_reading_it_as_absent():
    from model import validate_columns

    columns = {
        "driver.species": np.array(["proton"], dtype=object),
        "driver.offset_x_mm": np.array([math.nan], dtype=object),
    }
    for path, value in GOOD["driver"].items():
        columns.setdefault(f"driver.{path}", np.array([value], dtype=object))
    for path, value in GOOD["plasma"].items():
        columns[f"plasma.{path}"] = np.array([value], dtype=object)
    assert validate_columns(columns)["driver.offset_x_mm"][0] == 0.0  # absent -> default
    with pytest.raises(ShotInputError) as caught:
        validate_columns(columns, nan_is_absent=False)
    assert dict(caught.value.problems)["driver.offset_x_mm"].startswith("NaN or infinity is not allowed")


def test_the_rows_a_table_check_would_refuse_come_as_a_mask():
    from model.inputs import refused_rows

    n = 6
    columns = {f"driver.{k}": np.full(n, v, dtype=float) for k, v in GOOD["driver"].items() if k != "species"}
    columns |= {f"plasma.{k}": np.full(n, v, dtype=float) for k, v in GOOD["plasma"].items()}
    columns["driver.species"] = np.array(["proton"] * n)
    columns["seed.method"] = np.array(["none"] * n)
    columns["plasma.density_cm3"][2] = -5.0
    columns["plasma.gradient_pct_per_m"] = np.array([0.0, 0.0, 0.0, 0.0, 0.0, -20.0])  # 1 + g L <= 0 over 10 m
    assert refused_rows(columns).tolist() == [False, False, True, False, False, True]


def test_a_table_of_text_objects_names_missing_and_unknown_cells_like_a_shot_does():
    # object columns (as built from JSON payloads) are read in one pass; the odd cells keep their exact reading
    n = 5
    columns = {f"driver.{k}": np.full(n, v, dtype=float) for k, v in GOOD["driver"].items() if k != "species"}
    columns |= {f"plasma.{k}": np.full(n, v, dtype=float) for k, v in GOOD["plasma"].items()}
    odd = ["proton", None, "muon", 3, "a-species-name-longer-than-any-known"]
    columns["driver.species"] = np.array(odd, dtype=object)
    columns["seed.method"] = np.array([None, "none", math.nan, "", "none"], dtype=object)  # absent: the default
    with pytest.raises(ShotInputError) as caught:
        evaluate_table(columns)
    problems = caught.value.problems
    assert ("driver.species", "missing at rows 1") in problems
    reasons = " ".join(reason for path, reason in problems if path == "driver.species")
    assert "unknown species 'muon'" in reasons and "unknown species '3'" in reasons
    assert "unknown species 'a-species-name-longer-than-any-known'" in reasons
    assert [path for path, _ in problems if path == "seed.method"] == []
    columns["driver.species"] = np.array(["proton", "ion", "electron", "positron", "proton"], dtype=object)
    columns["driver.mass_amu"] = np.array([math.nan, 4.0, math.nan, math.nan, math.nan])
    columns["driver.charge_state"] = np.array([math.nan, 2.0, math.nan, math.nan, math.nan])
    clean = validate_columns(columns)
    assert clean["seed.method"].tolist() == ["none"] * 5
    assert clean.species_code.tolist() == [0, 3, 1, 2, 0] and clean.method_code.tolist() == [2] * 5
