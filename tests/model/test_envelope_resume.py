"""The envelope solver carried on from a saved state gives the uninterrupted run's numbers
exactly (what lets a detailed run resume after its worker died)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from model.envelope import EnvelopeState, simulate_envelope

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())


def _quick_shot() -> dict:
    shot = json.loads(json.dumps(CASES[0]["input"]))  # worked example ex-1
    shot["plasma"]["length_m"] = 0.5
    return shot


def test_a_run_resumed_from_any_saved_state_equals_the_uninterrupted_run():
    states: list[EnvelopeState] = []
    whole = simulate_envelope(_quick_shot(), checkpoint=states.append)
    assert len(states) >= 3 and states[0].step < states[-1].step
    for state in (states[0], states[len(states) // 2], states[-1]):
        resumed = simulate_envelope(_quick_shot(), resume=state)
        for key in ("z_m", "sigma_r_m", "reference_modulation_steps", "ez_v_m"):
            np.testing.assert_array_equal(resumed[key], whole[key], err_msg=f"{key} from step {state.step}")
        assert resumed["numerics"]["max_betatron_phase_per_step"] == whole["numerics"]["max_betatron_phase_per_step"]
        assert resumed["saturation_z_m"] == whole["saturation_z_m"]


def test_a_state_of_another_grid_is_refused():
    states: list[EnvelopeState] = []
    simulate_envelope(_quick_shot(), checkpoint=states.append)
    with pytest.raises(ValueError, match="another grid or step"):
        simulate_envelope(_quick_shot(), slices_per_wavelength=17, resume=states[0])
