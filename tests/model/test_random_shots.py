"""Every valid shot, drawn at random over the whole input domain of MODEL.md section 1, evaluates to finite
outputs, and its status follows from its flags (section 7). Property test with hypothesis: derandomised
(the same examples on every run) and bounded, so it is never flaky and takes a few seconds."""

from __future__ import annotations

import math

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from model import DEFAULT_SETTINGS, FLAG_CODES, OUTPUT_NAMES, evaluate_shot

# Outputs that are null by definition in some shots (MODEL.md sections 3, 4 and 8); all others always finite.
NULL_WHEN = {
    "waist_beta_m": lambda shot, out: shot["driver"].get("emittance_n_mm_mrad", 0.0) == 0.0,
    "seed_to_noise_efolds": lambda shot, out: shot["seed"]["method"] == "none",
    "saturation_length_m": lambda shot, out: out["growth_margin_efolds"] < 0.0,
    "frequency_mismatch_pct": lambda shot, out: "measured" not in shot,
    "implied_density_cm3": lambda shot, out: "measured" not in shot,
}


def log_uniform(low: float, high: float) -> st.SearchStrategy[float]:
    return st.floats(math.log10(low), math.log10(high)).map(lambda e: min(max(10.0**e, low), high))


@st.composite
def valid_shots(draw: st.DrawFn) -> dict:
    species = draw(st.sampled_from(["proton", "electron", "positron", "ion"]))
    sigma_z = draw(log_uniform(1e-3, 1e4))
    length = draw(log_uniform(1e-3, 1e3))
    driver = {
        "species": species,
        "momentum_gev": draw(log_uniform(0.01, 1e5)),
        "population": draw(log_uniform(1e6, 1e14)),
        "sigma_z_mm": sigma_z,
        "sigma_r_mm": draw(log_uniform(1e-4, 100.0)),
        "emittance_n_mm_mrad": draw(st.one_of(st.just(0.0), log_uniform(1e-3, 1e3))),
        "offset_x_mm": draw(st.floats(-100.0, 100.0)),
        "angle_y_mrad": draw(st.floats(-100.0, 100.0)),
    }
    if species == "ion":
        driver["mass_amu"] = draw(log_uniform(1.0, 300.0))
        driver["charge_state"] = draw(st.integers(-100, 100).filter(lambda q: q != 0))
    # the density stays positive to the exit: 1 + g L > 0 (g in %/m)
    gradient = draw(st.floats(max(-50.0, -100.0 / length * 0.999), 50.0))
    shot = {
        "driver": driver,
        "plasma": {
            "density_cm3": draw(log_uniform(1e10, 1e20)),
            "gradient_pct_per_m": gradient,
            "length_m": length,
            "ion_mass_amu": draw(log_uniform(1.0, 300.0)),
            "ion_charge": draw(st.floats(1.0, 100.0)),
        },
        "seed": {"method": draw(st.sampled_from(["ionization_front", "electron_bunch", "none"]))},
    }
    if shot["seed"]["method"] != "none":
        shot["seed"]["position_mm"] = draw(st.floats(-10.0, 10.0)) * sigma_z
    if shot["seed"]["method"] == "electron_bunch":
        shot["seed"] |= {
            "electron_charge_pc": draw(log_uniform(1e-3, 1e6)),
            "electron_sigma_z_mm": draw(log_uniform(1e-4, 100.0)),
            "electron_sigma_r_mm": draw(log_uniform(1e-4, 100.0)),
        }
    if draw(st.booleans()):
        shot["measured"] = {"modulation_freq_ghz": draw(log_uniform(1e-3, 1e5))}
    return shot


@settings(
    derandomize=True, database=None, max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
@given(valid_shots())
def test_every_valid_random_shot_has_finite_outputs_and_a_status_that_follows_from_its_flags(shot):
    out = evaluate_shot(shot)
    for name in OUTPUT_NAMES:
        value = out[name]
        if value is None:
            assert name in NULL_WHEN and NULL_WHEN[name](shot, out), (name, shot)
        else:
            assert math.isfinite(value), (name, value, shot)
    severities = {f["severity"] for f in out["flags"]}
    expected = "outside" if "outside" in severities else "marginal" if "marginal" in severities else "nominal"
    assert out["status"] == expected
    limits = DEFAULT_SETTINGS["limits"]
    for flag in out["flags"]:
        assert flag["code"] in FLAG_CODES and flag["message"].endswith(".")
        if flag["code"] == "UNSEEDED":
            assert flag["value"] is None and flag["limit"] is None and shot["seed"]["method"] == "none"
            continue
        assert flag["limit"] == limits[flag["code"]][flag["severity"]]
        below = flag["code"] in ("BUNCH_NOT_LONG", "WEAK_GROWTH", "WEAK_SEED", "SLOW_DRIVER")
        assert (flag["value"] < flag["limit"]) if below else (flag["value"] > flag["limit"]), flag
