"""A detailed run stops a fixed distance past saturation (project reading, MODEL.md "Project
readings"): the numbers up to the stop are the whole-plasma run's, and a run resumed from a
saved state stops at the same place."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from model.envelope import STOP_AFTER_SATURATION_M, EnvelopeState, simulate_envelope

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())


def _ex1(length_m: float) -> dict:
    shot = json.loads(json.dumps(CASES[0]["input"]))  # worked example ex-1 (saturates near 2.8 m)
    assert shot["shot_id"] == "ex-1"
    shot["plasma"]["length_m"] = length_m
    return shot


@pytest.fixture(scope="module")
def runs() -> tuple[dict, dict, list[EnvelopeState]]:
    shot = _ex1(4.0)
    states: list[EnvelopeState] = []
    stopped = simulate_envelope(shot, checkpoint=states.append)
    whole = simulate_envelope(shot, stop_after_saturation_m=None)
    return stopped, whole, states


def test_a_run_stops_half_a_metre_past_saturation_and_says_so(runs):
    stopped, whole, _ = runs
    assert STOP_AFTER_SATURATION_M == 0.5
    assert whole["stopped_at_m"] is None and whole["z_steps_m"][-1] == pytest.approx(4.0)
    saturation = stopped["saturation_z_m"]
    assert saturation is not None and saturation < 3.5
    dz = stopped["numerics"]["dz_m"]
    assert saturation + 0.5 <= stopped["stopped_at_m"] <= saturation + 0.5 + 2 * dz + 1e-12
    assert stopped["z_steps_m"][-1] == stopped["stopped_at_m"] == stopped["z_m"][-1] == stopped["ez_z_m"]
    assert stopped["plasma_length_m"] == 4.0
    assert (
        "the run stopped at z = " in stopped["validity_note"]
        and "0.5 m past the saturation point" in (stopped["validity_note"])
    )


def test_up_to_the_stop_the_numbers_are_the_whole_runs(runs):
    stopped, whole, _ = runs
    steps = stopped["numerics"]["steps"]
    assert steps < whole["numerics"]["steps"]
    np.testing.assert_array_equal(
        stopped["reference_modulation_steps"], whole["reference_modulation_steps"][: steps + 1]
    )
    for key in ("saturation_z_m", "saturation_reason", "valid_until_m", "fitted_efolds", "fit_range_m"):
        assert stopped[key] == whole[key], key
    # the stored sigma map is the whole run's up to the stop (same stride), plus the last step
    n = len(stopped["z_m"]) - 1
    np.testing.assert_array_equal(stopped["z_m"][:n], whole["z_m"][:n])
    np.testing.assert_array_equal(stopped["sigma_r_m"][:, :n], whole["sigma_r_m"][:, :n])


def test_a_stopping_run_resumed_from_a_saved_state_stops_at_the_same_place(runs):
    stopped, _, states = runs
    saturation_step = int(np.searchsorted(stopped["z_steps_m"], stopped["saturation_z_m"]))
    before = [s for s in states if s.step <= saturation_step]
    after = [s for s in states if s.step > saturation_step + 2]
    assert before and after
    for state in (before[-1], after[-1]):
        resumed = simulate_envelope(_ex1(4.0), resume=state)
        assert resumed["stopped_at_m"] == stopped["stopped_at_m"], state.step
        for key in ("z_m", "sigma_r_m", "reference_modulation_steps", "ez_v_m"):
            np.testing.assert_array_equal(resumed[key], stopped[key], err_msg=f"{key} from step {state.step}")


def test_a_run_that_never_saturates_goes_to_the_exit():
    result = simulate_envelope(_ex1(0.5))
    assert result["saturation_z_m"] is None and result["stopped_at_m"] is None
    assert result["z_steps_m"][-1] == pytest.approx(0.5)


def test_a_negative_stop_distance_is_refused():
    with pytest.raises(ValueError, match="stop_after_saturation_m"):
        simulate_envelope(_ex1(0.5), stop_after_saturation_m=-1.0)
