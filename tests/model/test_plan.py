"""The planner (model.plan): scans equal evaluate_shot cell by cell, nominal windows end where the rules say,
the nearest nominal shot is no farther than a brute-force search, and bad requests name the failing field."""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np
import pytest

from model import (
    DEFAULT_SETTINGS,
    FLAG_CODES,
    OUTPUT_FIELDS,
    SEVERITY_BY_RANK,
    STATUSES,
    PlanInputError,
    evaluate_shot,
    log_sensitivities,
    nearest_nominal,
    nominal_windows,
    plan_sensitivities,
    scan,
)
from model.plan import (
    EDGE_TOLERANCE,
    LINEAR_SPANS,
    PLAN_SENSITIVITY_OUTPUTS,
    SPAN_FACTOR,
    plan_base,
    positive_fields_set,
)
from model.rules import RULES, RULES_BY_CODE
from model.sensitivity import evaluate_where_valid

CASES = json.loads((Path(__file__).resolve().parents[1] / "data" / "reference_cases.json").read_text())
EX1, EX2, EX3 = (c["input"] for c in CASES[:3])  # EX3 is unseeded: never nominal (rule UNSEEDED always fires)


def shot_with(shot, **values):
    """A copy of `shot` with dotted-path fields replaced: shot_with(EX1, **{"plasma.density_cm3": 1e15})."""
    s = copy.deepcopy(shot)
    for path, value in values.items():
        section, name = path.split(".", 1)
        s.setdefault(section, {})[name] = value
    return s


def planned(shot, **values):
    """What the planner evaluates: the shot without its measurements, shot_id and taken_at."""
    s = {k: v for k, v in shot_with(shot, **values).items() if k not in ("measured", "shot_id", "taken_at")}
    return s


def status_of(shot, settings=None, **values):
    return evaluate_shot(planned(shot, **values), settings)["status"]


def fired(shot, settings=None, **values):
    flags = evaluate_shot(planned(shot, **values), settings)["flags"]
    return {f["code"] for f in flags if f["severity"] in ("marginal", "outside")}


def relaxed(*keep):
    """Settings in which only the rules `keep` can fire (every other limit moved out of reach)."""
    limits = {}
    for rule in RULES:
        defaults = DEFAULT_SETTINGS["limits"].get(rule.code)
        if rule.code in keep or defaults is None:
            continue
        far = -1e300 if rule.bad_when == "below" else 1e300
        limits[rule.code] = {name: far for name in defaults}
    return {"limits": limits}


def failing(base, keep=(), **fractions):
    """Settings in which only the rules `keep` and `fractions` can fire; each rule of `fractions` (an "above"
    rule) gets a marginal limit of that fraction of the base's own metric, so the base fails it."""
    settings = relaxed(*keep, *fractions)
    evaluation = evaluate_shot(planned(base))
    for code, fraction in fractions.items():
        settings["limits"][code] = {"marginal": fraction * evaluation[RULES_BY_CODE[code].metric], "outside": 1e300}
    return settings


def problems(call):
    with pytest.raises(PlanInputError) as caught:
        call()
    return dict(caught.value.problems)


# ------------------------------------------------------------------------------------------ scans


def test_every_cell_of_a_two_axis_scan_equals_evaluate_shot_of_that_point():
    axes = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 2e15, "steps": 6, "spacing": "log"},
        {"field": "seed.position_mm", "start": -70.0, "stop": 140.0, "steps": 5, "spacing": "linear"},
    ]
    result = scan(EX1, axes)
    assert result.shape == (6, 5)
    np.testing.assert_array_equal(result.axes[0].values, np.geomspace(1e14, 2e15, 6))
    np.testing.assert_array_equal(result.axes[1].values, np.linspace(-70.0, 140.0, 5))
    assert [a.unit for a in result.axes] == ["cm^-3", "mm"]
    for i, density in enumerate(result.axes[0].values):
        for j, position in enumerate(result.axes[1].values):
            cell = i * 5 + j  # row-major: the first axis varies slowest
            expected = evaluate_shot(planned(EX1, **{"plasma.density_cm3": density, "seed.position_mm": position}))
            assert STATUSES[result.status[cell]] == expected["status"]
            for name, values in result.outputs.items():
                got = values[cell]
                assert (expected[name] is None and math.isnan(got)) or got == expected[name], name
            severities = {f["code"]: f["severity"] for f in expected["flags"]}
            for code in FLAG_CODES:
                assert SEVERITY_BY_RANK[result.flags[code][cell]] == severities.get(code, "")


def test_a_one_axis_scan_gives_every_output_except_the_measured_ones_by_default_or_the_ones_asked_for():
    axis = {"field": "plasma.length_m", "start": 1.0, "stop": 20.0, "steps": 40}
    result = scan(EX1, [axis])
    assert result.shape == (40,) and result.status.dtype == np.int8
    assert set(result.outputs) == {f.name for f in OUTPUT_FIELDS if not f.measured_only}
    assert set(result.flags) == set(FLAG_CODES)
    few = scan(EX1, [axis], outputs=["efolds_exit", "saturation_length_m"])
    assert list(few.outputs) == ["efolds_exit", "saturation_length_m"]
    np.testing.assert_array_equal(few.outputs["efolds_exit"], result.outputs["efolds_exit"])


def test_a_plan_drops_the_measurements_so_no_measured_rule_fires():
    base = shot_with(EX1, **{"measured.modulation_freq_ghz": 250.0})  # 39 % off f_p: DENSITY_MISMATCH if kept
    base |= {"shot_id": "q-17", "taken_at": "2026-11-20T10:00:00Z"}
    assert "DENSITY_MISMATCH" in {f["code"] for f in evaluate_shot(base)["flags"]}
    result = scan(base, [{"field": "plasma.length_m", "start": 8.0, "stop": 8.0, "steps": 1}])
    assert result.flags["DENSITY_MISMATCH"].tolist() == [0]
    assert STATUSES[result.status[0]] == status_of(base)


def test_campaign_settings_are_used_for_the_scan():
    axis = [{"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 5, "spacing": "log"}]
    strict = {"reference_slice_sigma": 2.0, "limits": {"WEAK_SEED": {"marginal": 9.0, "outside": 8.0}}}
    result = scan(EX1, axis, settings=strict)
    for cell, density in enumerate(result.axes[0].values):
        expected = evaluate_shot(planned(EX1, **{"plasma.density_cm3": density}), strict)
        assert STATUSES[result.status[cell]] == expected["status"]
        assert result.outputs["density_tolerance_pct"][cell] == expected["density_tolerance_pct"]


@pytest.mark.parametrize(
    ("axis", "path", "words"),
    [
        ({"field": "plasma.density_cm3", "start": 1e9, "stop": 1e15, "steps": 3}, "axes.0.start", "out of range"),
        ({"field": "plasma.density_cm3", "start": 1e14, "stop": 1e21, "steps": 3}, "axes.0.stop", "out of range"),
        ({"field": "plasma.colour", "start": 1, "stop": 2, "steps": 3}, "axes.0.field", "unknown input field"),
        ({"field": "measured.modulation_freq_ghz", "start": 1, "stop": 2, "steps": 3}, "axes.0.field", "measured"),
        ({"field": "driver.species", "start": 1, "stop": 2, "steps": 3}, "axes.0.field", "not a numeric input"),
        (
            {"field": "seed.electron_charge_pc", "start": 1, "stop": 2, "steps": 3},
            "axes.0.field",
            "not used by this base",
        ),
        (
            {"field": "driver.offset_x_mm", "start": -1.0, "stop": 1.0, "steps": 3, "spacing": "log"},
            "axes.0.start",
            "log spacing",
        ),
        ({"field": "plasma.length_m", "start": 1.0, "stop": 2.0, "steps": 0}, "axes.0.steps", "integer >= 1"),
        (
            {"field": "plasma.length_m", "start": 1.0, "stop": 2.0, "steps": 3, "spacing": "cubic"},
            "axes.0.spacing",
            "linear",
        ),
        ({"field": "plasma.length_m", "start": "one", "stop": 2.0, "steps": 3}, "axes.0.start", "finite number"),
        ({"field": "plasma.length_m", "start": 1.0, "stop": math.inf, "steps": 3}, "axes.0.stop", "finite number"),
    ],
)
def test_a_bad_axis_is_refused_naming_the_axis_entry(axis, path, words):
    found = problems(lambda: scan(EX1, [axis]))
    assert path in found and words in found[path]


def test_an_axis_that_moves_another_fields_limit_is_refused_at_the_end_that_crosses_it():
    # MODEL.md section 1: |zeta_s| <= 10 sigma_z; ex-1 has zeta_s = 35 mm, so sigma_z below 3.5 mm is refused
    found = problems(lambda: scan(EX1, [{"field": "driver.sigma_z_mm", "start": 2.0, "stop": 90.0, "steps": 5}]))
    assert list(found) == ["axes.0.start"] and "seed.position_mm" in found["axes.0.start"]
    # each axis alone is fine, the corner (zeta_s = 300 mm, sigma_z = 20 mm) is not
    axes = [
        {"field": "seed.position_mm", "start": 0.0, "stop": 300.0, "steps": 4},
        {"field": "driver.sigma_z_mm", "start": 20.0, "stop": 70.0, "steps": 3},
    ]
    found = problems(lambda: scan(EX1, axes))
    assert set(found) == {"axes.0.stop", "axes.1.start"}
    assert "seed.position_mm" in found["axes.0.stop"]


def test_scan_size_axis_count_duplicates_outputs_and_a_bad_base_are_refused_by_name():
    big = [
        {"field": "plasma.density_cm3", "start": 1e14, "stop": 1e15, "steps": 501},
        {"field": "plasma.length_m", "start": 1.0, "stop": 10.0, "steps": 500},
    ]
    assert "250,000" in problems(lambda: scan(EX1, big))["axes"]
    assert "axes" in problems(lambda: scan(EX1, []))
    twice = [{"field": "plasma.length_m", "start": 1.0, "stop": 2.0, "steps": 2}] * 2
    assert "already axis 0" in problems(lambda: scan(EX1, twice))["axes.1.field"]
    one = [{"field": "plasma.length_m", "start": 1.0, "stop": 2.0, "steps": 2}]
    found = problems(lambda: scan(EX1, one, outputs=["efolds_exit", "efolds_total", "implied_density_cm3"]))
    assert set(found) == {"outputs.1", "outputs.2"}
    bad_base = shot_with(EX1, **{"plasma.density_cm3": -4e14})
    assert "base.plasma.density_cm3" in problems(lambda: scan(bad_base, one))


def test_an_integer_field_scans_only_over_integers():
    ion = shot_with(EX1, **{"driver.species": "ion", "driver.mass_amu": 207.2, "driver.charge_state": 20})
    result = scan(ion, [{"field": "driver.charge_state", "start": 10, "stop": 40, "steps": 4}])
    assert result.axes[0].values.tolist() == [10.0, 20.0, 30.0, 40.0]
    found = problems(lambda: scan(ion, [{"field": "driver.charge_state", "start": 10, "stop": 40, "steps": 5}]))
    assert "integers" in found["axes.0.steps"]


# ------------------------------------------------------------------------------------------ windows


def beyond(window, edge, side):
    """The value just past an edge: a little more than the edge accuracy beyond it."""
    sign = -1.0 if side == "low" else 1.0
    if window.spacing == "log":
        return edge * math.exp(sign * 1.01 * EDGE_TOLERANCE)
    scale = (window.span_high - window.span_low) / (2 * LINEAR_SPANS[window.field][0])  # a span is +-k scales
    return edge + sign * 1.01 * EDGE_TOLERANCE * scale


def assert_edges_hold(base, windows, settings=None):
    checked = 0
    for w in windows.windows:
        for side in ("low", "high"):
            edge, rules = getattr(w, side), getattr(w, f"{side}_rules")
            if edge is None:
                continue
            assert status_of(base, settings, **{w.field: edge}) == "nominal", (w.field, side)
            outside = beyond(w, edge, side)
            if getattr(w, f"{side}_problems"):
                with pytest.raises(Exception, match="out of range"):
                    evaluate_shot(planned(base, **{w.field: outside}), settings)
            else:
                assert status_of(base, settings, **{w.field: outside}) != "nominal", (w.field, side)
                assert rules and set(rules) <= fired(base, settings, **{w.field: outside}), (w.field, side)
            checked += 1
    return checked


def test_window_edges_are_nominal_just_inside_and_not_just_outside_with_the_reported_rules_firing():
    windows = nominal_windows(EX1)
    assert STATUSES[windows.base_status] == status_of(EX1) == "nominal"
    assert [w.field for w in windows.windows] == positive_fields_set(EX1)
    assert all(w.found and w.contains_base and w.spacing == "log" for w in windows.windows)
    assert all(w.low is None or w.low <= w.base <= (w.high or math.inf) for w in windows.windows)
    assert assert_edges_hold(EX1, windows) > 0


def test_windows_of_fields_that_may_be_negative_use_the_documented_linear_spans():
    windows = nominal_windows(EX1, list(LINEAR_SPANS))
    by_field = {w.field: w for w in windows.windows}
    sigma_z, sigma_r = EX1["driver"]["sigma_z_mm"], EX1["driver"]["sigma_r_mm"]
    seed = by_field["seed.position_mm"]
    assert (seed.span_low, seed.span_high) == (35.0 - 2 * sigma_z, 35.0 + 2 * sigma_z)
    gradient = by_field["plasma.gradient_pct_per_m"]
    assert (gradient.span_low, gradient.span_high) == pytest.approx((0.2 - 5.0, 0.2 + 5.0))
    offset = by_field["driver.offset_x_mm"]
    assert (offset.span_low, offset.span_high) == pytest.approx((0.02 - sigma_r, 0.02 + sigma_r))
    z_ref = evaluate_shot(planned(EX1))["saturation_length_m"]
    angle = by_field["driver.angle_y_mrad"]
    assert angle.span_high == pytest.approx(2 * sigma_r / z_ref) and angle.spacing == "linear"
    assert assert_edges_hold(EX1, windows) > 0


def test_a_window_of_a_non_nominal_base_is_the_nominal_interval_nearest_in_log_distance():
    # Only NONLINEAR_DRIVE (at 0.7 of the base's n_b0/n_0) and BEAM_TOO_WIDE (default k_p sigma_r limit) active:
    # the base fails the first, and the nominal interval in density lies above it (MODEL.md section 2:
    # n_b0/n_0 ~ 1/n_0, k_p sigma_r ~ sqrt(n_0), NRL Plasma Formulary)
    settings = failing(EX1, ["BEAM_TOO_WIDE"], NONLINEAR_DRIVE=0.7)
    n0 = EX1["plasma"]["density_cm3"]
    assert status_of(EX1, settings) != "nominal"
    (window,) = nominal_windows(EX1, ["plasma.density_cm3"], settings).windows
    assert window.found and not window.contains_base
    assert window.low == pytest.approx(n0 / 0.7, rel=2 * EDGE_TOLERANCE) and window.low_rules == ("NONLINEAR_DRIVE",)
    kp_sigma_r = evaluate_shot(planned(EX1))["kp_sigma_r"]
    wide = DEFAULT_SETTINGS["limits"]["BEAM_TOO_WIDE"]["marginal"]
    assert window.high == pytest.approx(n0 * (wide / kp_sigma_r) ** 2, rel=2 * EDGE_TOLERANCE)
    assert window.high_rules == ("BEAM_TOO_WIDE",)
    # brute force over the same span: the nominal runs of a fine log grid, the nearest one in log distance
    grid = np.geomspace(n0 / SPAN_FACTOR, n0 * SPAN_FACTOR, 4001)
    axis = {"field": "plasma.density_cm3", "start": grid[0], "stop": grid[-1], "steps": grid.size, "spacing": "log"}
    nominal = scan(EX1, [axis], settings).status == STATUSES.index("nominal")
    runs = np.split(np.arange(grid.size), np.nonzero(np.diff(nominal.astype(int)))[0] + 1)
    runs = [r for r in runs if nominal[r[0]]]
    gap = [min(abs(math.log(grid[r[0]] / n0)), abs(math.log(grid[r[-1]] / n0))) for r in runs]
    run = runs[int(np.argmin(gap))]
    step = math.log(grid[1] / grid[0])
    for side, index, edge in (("low", run[0], window.low), ("high", run[-1], window.high)):
        if index in (0, grid.size - 1):
            assert edge is None, side
        else:
            assert abs(math.log(edge / grid[index])) <= step, side
    assert assert_edges_hold(EX1, nominal_windows(EX1, ["plasma.density_cm3"], settings), settings) == 2


def test_no_window_when_nothing_is_nominal_and_null_edges_when_the_span_is_nominal_throughout():
    (none,) = nominal_windows(EX3, ["plasma.density_cm3"]).windows  # unseeded: UNSEEDED always fires
    assert not none.found and none.low is None and none.high is None and not none.low_rules
    everything = nominal_windows(EX1, ["plasma.density_cm3", "plasma.length_m"], settings=relaxed())
    for w in everything.windows:
        assert w.found and w.contains_base and w.low is None and w.high is None
        assert (w.span_low, w.span_high) == pytest.approx((w.base / SPAN_FACTOR, w.base * SPAN_FACTOR))


def test_a_window_clipped_by_the_valid_range_stops_at_the_range_end():
    low_population = shot_with(EX1, **{"driver.population": 3e6})  # factor 10 below is under the 1e6 minimum
    (w,) = nominal_windows(low_population, ["driver.population"], settings=relaxed()).windows
    assert w.span_low == 1e6 and w.low is None


def test_a_window_end_set_by_another_fields_range_is_reported_with_the_validation_problem():
    # MODEL.md section 1: |zeta_s| <= 10 sigma_z, so with zeta_s = 300 mm sigma_z may not go below 30 mm
    base = shot_with(EX1, **{"seed.position_mm": 300.0})
    (w,) = nominal_windows(base, ["driver.sigma_z_mm"], settings=relaxed()).windows
    assert w.low == pytest.approx(30.0, rel=EDGE_TOLERANCE) and w.low >= 30.0
    assert w.low_rules == () and w.low_problems and w.low_problems[0][0] == "seed.position_mm"
    assert w.high is None


def test_density_window_ends_where_the_bunch_gets_short_and_the_beam_wide_by_the_plasma_frequency():
    # Outside check: with only BUNCH_NOT_LONG (sigma_z/lambda_p) and BEAM_TOO_WIDE (k_p sigma_r) active (MODEL.md
    # section 7), the density window is bounded where sigma_z = limit * lambda_p and k_p sigma_r = limit, with
    # lambda_p = 2 pi c/omega_p and omega_p from plasmapy.formulary (NRL Plasma Formulary: omega_pe ~ sqrt(n_e)).
    formulary = pytest.importorskip("plasmapy.formulary")
    u = pytest.importorskip("astropy.units")
    from scipy import constants

    short_limit = DEFAULT_SETTINGS["limits"]["BUNCH_NOT_LONG"]["marginal"]
    wide_limit = DEFAULT_SETTINGS["limits"]["BEAM_TOO_WIDE"]["marginal"]
    reference = 1e14  # cm^-3
    omega_ref = formulary.plasma_frequency(reference * u.cm**-3, particle="e-").to_value(u.rad / u.s)

    def density_for(omega):  # omega_p ~ sqrt(n)
        return reference * (omega / omega_ref) ** 2

    sigma_z_mm = EX1["driver"]["sigma_z_mm"]
    n_low = density_for(2 * math.pi * constants.c * short_limit / (sigma_z_mm * 1e-3))
    n_high = 8.0 * n_low
    sigma_r_mm = wide_limit / (math.sqrt(n_high / reference) * omega_ref / constants.c) * 1e3
    base = shot_with(EX1, **{"plasma.density_cm3": math.sqrt(n_low * n_high), "driver.sigma_r_mm": sigma_r_mm})
    settings = relaxed("BUNCH_NOT_LONG", "BEAM_TOO_WIDE")
    (w,) = nominal_windows(base, ["plasma.density_cm3"], settings=settings).windows
    assert w.low_rules == ("BUNCH_NOT_LONG",) and w.high_rules == ("BEAM_TOO_WIDE",)
    assert w.low == pytest.approx(n_low, rel=2 * EDGE_TOLERANCE)
    assert w.high == pytest.approx(n_high, rel=2 * EDGE_TOLERANCE)


def test_window_fields_are_checked_by_name():
    found = problems(lambda: nominal_windows(EX1, ["plasma.density_cm3", "plasma.colour", "plasma.density_cm3"]))
    assert set(found) == {"fields.1", "fields.2"}
    cold = shot_with(EX1, **{"driver.emittance_n_mm_mrad": 0.0})
    assert "not a positive field" in problems(lambda: nominal_windows(cold, ["driver.emittance_n_mm_mrad"]))["fields.0"]
    assert "driver.emittance_n_mm_mrad" not in positive_fields_set(cold)


# ------------------------------------------------------------------------------------------ nearest nominal


def brute_force_nearest(base, vary, points_per_axis, settings=None):
    """The nominal point of a log grid over the factor-10 span nearest to the base in sqrt(sum (x/x0 - 1)^2)."""
    b = plan_base(planned(base))
    x0 = np.array([b.value(p) for p in vary])
    axes = [np.geomspace(x / SPAN_FACTOR, x * SPAN_FACTOR, points_per_axis) for x in x0]
    x = np.stack([g.ravel() for g in np.meshgrid(*axes, indexing="ij")], axis=1)
    columns = {path: values[0:1].reshape(()) for path, values in b.columns.items()}
    columns |= {p: x[:, i] for i, p in enumerate(vary)}
    _, table = evaluate_where_valid(columns, settings)
    nominal = table["status"] == STATUSES.index("nominal")
    distance = np.linalg.norm(x / x0 - 1.0, axis=1)
    return distance[nominal].min() if nominal.any() else None


# (rules the base fails at a fraction of its own metric, fields varied, brute-force points per field)
NEAREST_CASES = [
    ({"NONLINEAR_DRIVE": 0.7}, ["plasma.density_cm3"], 20001),
    ({"HOSING_RISK": 0.5}, ["driver.sigma_r_mm", "plasma.density_cm3"], 401),
    (
        {"HOSING_RISK": 0.5, "NONLINEAR_DRIVE": 0.8},
        ["plasma.density_cm3", "driver.population", "driver.sigma_r_mm"],
        61,
    ),
    (
        {"HOSING_RISK": 0.5, "NONLINEAR_DRIVE": 0.8},
        ["plasma.density_cm3", "driver.population", "driver.sigma_r_mm", "plasma.length_m"],
        21,
    ),
]


@pytest.mark.parametrize(("fractions", "vary", "points"), NEAREST_CASES, ids=[str(len(c[1])) for c in NEAREST_CASES])
def test_the_nearest_nominal_shot_is_nominal_and_no_farther_than_a_brute_force_grid_search(fractions, vary, points):
    settings = failing(EX1, ["BEAM_TOO_WIDE", "BUNCH_NOT_LONG"], **fractions)
    assert status_of(EX1, settings) != "nominal"
    best = brute_force_nearest(EX1, vary, points, settings)
    assert best is not None
    result = nearest_nominal(EX1, vary, settings)
    assert result.found and STATUSES[result.status] == "nominal"
    assert result.distance <= 1.02 * best
    assert evaluate_shot(result.shot, settings)["status"] == "nominal"
    b = plan_base(EX1)
    y = np.array([result.inputs[p] / b.value(p) - 1.0 for p in vary])
    assert result.distance == pytest.approx(float(np.linalg.norm(y)), rel=1e-12)
    assert all(b.value(p) / SPAN_FACTOR <= result.inputs[p] <= b.value(p) * SPAN_FACTOR for p in vary)
    assert result.evaluation["status"] == result.status and result.evaluation["efolds_exit"] > 0


def test_the_nearest_density_past_a_density_ratio_limit_is_where_the_ratio_meets_it():
    # MODEL.md section 2: n_b0/n_0 ~ 1/n_0 (n_b0 does not depend on the plasma), so with the limit at 0.7 of the
    # base's ratio the nearest nominal density is n_0/0.7, a distance 1/0.7 - 1
    result = nearest_nominal(EX1, ["plasma.density_cm3"], failing(EX1, NONLINEAR_DRIVE=0.7))
    assert result.distance == pytest.approx(1 / 0.7 - 1, rel=2 * EDGE_TOLERANCE)


def test_the_nearest_nominal_point_sits_on_the_edge_of_the_nominal_region():
    settings = failing(EX1, HOSING_RISK=0.5)
    result = nearest_nominal(EX1, ["plasma.density_cm3", "driver.sigma_r_mm"], settings)
    b = plan_base(EX1)
    closer = {p: b.value(p) + (v - b.value(p)) * (1 - 2 * EDGE_TOLERANCE) for p, v in result.inputs.items()}
    assert status_of(EX1, settings, **closer) != "nominal"


def test_a_nominal_base_is_its_own_nearest_nominal_shot_and_an_unseeded_one_has_none():
    result = nearest_nominal(EX1, ["plasma.density_cm3", "driver.population"])
    assert result.found and result.distance == 0.0
    assert result.inputs == {"plasma.density_cm3": 4e14, "driver.population": 2e11}
    none = nearest_nominal(EX3, ["plasma.density_cm3", "plasma.length_m"])
    assert not none.found and none.distance is None and none.inputs == {} and none.shot is None


def test_the_fields_to_vary_are_checked_by_name():
    assert "vary" in problems(lambda: nearest_nominal(EX1, []))
    assert "vary" in problems(lambda: nearest_nominal(EX1, ["plasma.density_cm3"] * 5))
    found = problems(lambda: nearest_nominal(EX1, ["plasma.density_cm3", "seed.position_mm", "plasma.density_cm3"]))
    assert set(found) == {"vary.1", "vary.2"} and "positive" in found["vary.1"]


# ------------------------------------------------------------------------------------------ sensitivities


def test_the_sensitivity_table_covers_every_positive_input_the_base_sets_largest_first():
    rows = plan_sensitivities(EX1)
    fields = positive_fields_set(EX1)
    assert {(r.output, r.field) for r in rows} == {(q, f) for q in PLAN_SENSITIVITY_OUTPUTS for f in fields}
    magnitudes = [abs(r.value) for r in rows if math.isfinite(r.value)]
    assert magnitudes == sorted(magnitudes, reverse=True)
    first_nan = next((i for i, r in enumerate(rows) if math.isnan(r.value)), len(rows))
    assert all(math.isnan(r.value) for r in rows[first_nan:])
    direct = log_sensitivities(plan_base(EX1).columns, fields, PLAN_SENSITIVITY_OUTPUTS)
    for r in rows:
        expected = direct.values[r.output][0, fields.index(r.field)]
        assert r.value == expected or (math.isnan(r.value) and math.isnan(expected))
    # Kumar, Pukhov, Lotov, PRL 104, 255003 (2010): N(L) ~ L^{2/3}; MODEL.md section 5: density tolerance ~ 1/sqrt(n)
    by_pair = {(r.output, r.field): r.value for r in rows}
    assert by_pair[("efolds_exit", "plasma.length_m")] == pytest.approx(2 / 3, abs=1e-6)
    assert by_pair[("density_tolerance_pct", "plasma.density_cm3")] == pytest.approx(-0.5, abs=1e-6)
