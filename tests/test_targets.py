"""Tests of handling targets (lapbalance.targets) and the `lapbalance check` command."""

from __future__ import annotations

import json
import textwrap
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from click.testing import CliRunner

from lapbalance import targets as T
from lapbalance.car import load_car
from lapbalance.errors import InputError
from lapbalance.lap import simulate_lap
from tests.helpers import analytic_track

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "examples"

# Invented test track: straights and four constant-radius corners (60, 250, 40, 120 m).
SEGMENTS = [(600, 0.0), (150, 1 / 60), (400, 0.0), (300, -1 / 250), (500, 0.0),
            (200, 1 / 40), (300, 0.0), (250, 1 / 120)]


def _track():
    k, corners, d = [], [], 0
    for length, kk in SEGMENTS:
        if kk:
            corners.append(SimpleNamespace(
                id=len(corners) + 1, direction="left" if kk > 0 else "right", entry_m=d,
                apex_m=d + length / 2, exit_m=d + length - 1, min_radius_m=1 / abs(kk)))
        k += [kk] * length
        d += length
    return analytic_track(np.array(k), 1.0, closed=False, corners=corners, name="test ring")


@pytest.fixture(scope="module")
def lap():
    return simulate_lap(load_car(EXAMPLES / "gt_coupe.toml"), _track(), start_speed_kph=150)


def _write(tmp_path, body, name="t.toml"):
    p = tmp_path / name
    p.write_text(textwrap.dedent(body), encoding="utf-8")
    return p


def _one(tmp_path, lap, quantity, condition, scope=None, aggregate=None, model=""):
    body = model + f'\n[[target]]\nname = "t"\nquantity = "{quantity}"\ncondition = {condition}\n'
    if scope is not None:
        body += f"scope = {scope}\n"
    if aggregate is not None:
        body += f'aggregate = "{aggregate}"\n'
    (o,) = T.check(lap, T.load_targets(_write(tmp_path, body)))
    return o


# ------------------------------------------------------------------ conditions


def test_condition_max_and_min_on_channel(tmp_path, lap):
    ur = lap.channels["usage_rear"]
    o = _one(tmp_path, lap, "usage_rear", "{ max = 1.001 }")
    assert o.passed and o.measured == pytest.approx(ur.max())
    o = _one(tmp_path, lap, "usage_rear", f"{{ max = {ur.max() - 0.01} }}")
    assert not o.passed and o.status == "fail"
    assert o.failing == int(np.sum(ur > ur.max() - 0.01))
    i = int(np.argmax(ur))
    assert o.worst["distance_m"] == lap.channels["distance_m"][i]
    o = _one(tmp_path, lap, "speed_kph", "{ min = 50 }")
    assert o.passed and o.measured == pytest.approx(lap.channels["speed_kph"].min())
    o = _one(tmp_path, lap, "speed_kph", "{ min = 100 }")
    assert not o.passed


def test_condition_range_worst_is_the_farthest_outside(tmp_path, lap):
    v = lap.channels["speed_kph"]
    o = _one(tmp_path, lap, "speed_kph", "{ range = [100, 200] }")
    assert not o.passed
    # the worst value lies farthest outside the window
    assert o.measured == pytest.approx(v.min() if 100 - v.min() > v.max() - 200 else v.max())
    assert o.failing == int(np.sum((v < 100) | (v > 200)))
    o = _one(tmp_path, lap, "speed_kph", "{ range = [0, 400] }")
    assert o.passed and o.detail.startswith("all ")


def test_condition_in_and_not_in_on_corner_text(tmp_path, lap):
    verdicts = [c["liftoff_verdict"] for c in lap.corners]
    first = verdicts[0]
    o = _one(tmp_path, lap, "liftoff_verdict", f'{{ not_in = ["{first}"] }}')
    assert not o.passed
    assert o.failing == verdicts.count(first)
    assert o.measured == first and o.worst["corner"] == 1
    o = _one(tmp_path, lap, "liftoff_verdict",
             '{ in = ["lift-critical", "lift-marginal", "lift-close", "lift-safe", '
             '"not-checked"] }')
    assert o.passed and o.worst is None and o.failing == 0
    o = _one(tmp_path, lap, "liftoff_verdict", f'{{ in = ["{first}"] }}')
    assert o.passed == (len(set(verdicts)) == 1)
    o = _one(tmp_path, lap, "limiting_axle", '{ in = ["rear"] }')
    assert o.passed == all(c["limiting_axle"] == "rear" for c in lap.corners)
    assert o.failing == sum(c["limiting_axle"] != "rear" for c in lap.corners)


def test_lap_quantities(tmp_path, lap):
    o = _one(tmp_path, lap, "lap_time_s", f"{{ max = {lap.lap_time_s + 0.1} }}")
    assert o.passed and o.measured == pytest.approx(lap.lap_time_s) and o.worst is None
    o = _one(tmp_path, lap, "liftoff_rear_saturates_count", "{ max = 0 }")
    n = sum(c["liftoff_rear_reserve"] is not None and c["liftoff_rear_reserve"] < 0
            for c in lap.corners)
    assert o.measured == n and o.passed == (n == 0)
    o = _one(tmp_path, lap, "liftoff_flagged_count", "{ max = 0 }")
    n = sum(c["liftoff_verdict"] in ("lift-critical", "lift-marginal") for c in lap.corners)
    assert o.measured == n and o.passed == (n == 0)
    o = _one(tmp_path, lap, "liftoff_critical_count", "{ max = 0 }")
    assert o.measured == sum(c["liftoff_verdict"] == "lift-critical" for c in lap.corners)
    o = _one(tmp_path, lap, "balance_migration", "{ range = [-0.001, 0.001] }")
    assert o.passed
    model = ("[model]\ncornering_stiffness_front_n_per_deg = 3400\n"
             "cornering_stiffness_rear_n_per_deg = 4200\n")
    o = _one(tmp_path, lap, "understeer_gradient_deg_per_g", "{ min = 0 }", model=model)
    assert o.passed and o.unit == "deg/g"
    o = _one(tmp_path, lap, "limit_understeer_index", "{ min = 0 }")
    assert o.passed  # the GT's front saturates first on the 100 m radius


def test_characteristic_speed_without_understeer_is_no_data(tmp_path, lap):
    model = ("[model]\ncornering_stiffness_front_n_per_deg = 4200\n"
             "cornering_stiffness_rear_n_per_deg = 3000\n")
    o = _one(tmp_path, lap, "characteristic_speed_kph", "{ min = 100 }", model=model)
    assert o.status == "no-data" and not o.passed and o.measured is None


# ------------------------------------------------------------------ scopes


def test_scope_speed_band(tmp_path, lap):
    v = lap.channels["speed_kph"]
    o = _one(tmp_path, lap, "speed_kph", "{ min = 150 }", scope="{ speed_kph = [150, 400] }")
    assert o.passed and o.count == int(np.sum((v >= 150) & (v <= 400)))


def test_scope_whole_lap_string(tmp_path, lap):
    o = _one(tmp_path, lap, "speed_kph", "{ min = 0 }", scope='"whole lap"')
    assert o.count == len(lap.channels["speed_kph"]) and o.scope == "whole lap"


def test_scope_corners_on_steps(tmp_path, lap):
    o = _one(tmp_path, lap, "usage_rear", "{ max = 2 }", scope="{ corners = [2, 4] }")
    cid = lap.channels["corner_id"]
    assert o.count == int(np.sum((cid == 2) | (cid == 4)))
    assert o.worst["corner"] in (2, 4)
    o = _one(tmp_path, lap, "min_speed_kph", "{ min = 0 }", scope="{ corners = [3] }")
    assert o.count == 1 and o.measured == pytest.approx(lap.corners[2]["min_speed_kph"])


def test_scope_corners_above_a_speed(tmp_path, lap):
    fast = [c["id"] for c in lap.corners if c["min_speed_kph"] >= 150]
    assert 0 < len(fast) < len(lap.corners)
    o = _one(tmp_path, lap, "min_speed_kph", "{ min = 0 }",
             scope="{ corner_min_speed_kph = 150 }")
    assert o.count == len(fast)
    o = _one(tmp_path, lap, "balance_index", "{ max = 1 }",
             scope="{ corner_min_speed_kph = 150 }")
    assert o.count == int(np.isin(lap.channels["corner_id"], fast).sum())


def test_scope_distance_band(tmp_path, lap):
    o = _one(tmp_path, lap, "speed_kph", "{ min = 0 }", scope="{ distance_m = [100, 199] }")
    assert o.count == 100
    # corners whose slowest point lies in the band: corners 1 and 2 start at 600 and 1150 m
    o = _one(tmp_path, lap, "min_speed_kph", "{ min = 0 }", scope="{ distance_m = [0, 1500] }")
    assert o.count == 2


def test_corner_quantity_without_values_is_no_data(tmp_path, lap):
    from dataclasses import replace

    rows = [{**c, "liftoff_max_usage_rear": None} for c in lap.corners]
    o = _one(tmp_path, replace(lap, corners=rows), "liftoff_max_usage_rear", "{ max = 1 }")
    assert o.status == "no-data" and not o.passed and "not checked for lift-off" in o.detail


def test_scope_curve_speed_band(tmp_path, lap):
    o = _one(tmp_path, lap, "aero_balance_vs_speed_ground", "{ range = [0.37, 0.39] }",
             scope="{ speed_kph = [100, 300] }")
    assert o.passed and o.measured == pytest.approx(0.38)
    assert 100 <= o.worst["speed_kph"] <= 300


# ------------------------------------------------------------------ aggregates


@pytest.mark.parametrize(("agg", "fn"), [
    ("max", np.max), ("min", np.min), ("mean", np.mean), ("median", np.median),
    ("p95", lambda a: np.percentile(a, 95)), ("p5", lambda a: np.percentile(a, 5))])
def test_aggregates_match_numpy(tmp_path, lap, agg, fn):
    sel = lap.channels["speed_kph"] >= 150
    want = float(fn(lap.channels["usage_front"][sel]))
    o = _one(tmp_path, lap, "usage_front", f"{{ max = {want + 1e-9} }}",
             scope="{ speed_kph = [150, 400] }", aggregate=agg)
    assert o.measured == pytest.approx(want) and o.passed
    o = _one(tmp_path, lap, "usage_front", f"{{ max = {want - 1e-6} }}",
             scope="{ speed_kph = [150, 400] }", aggregate=agg)
    assert not o.passed and o.failing == 1


def test_outcomes_are_json(tmp_path, lap):
    o = _one(tmp_path, lap, "liftoff_max_usage_rear", "{ max = 1.0 }")
    d = json.loads(json.dumps(o.to_dict(), allow_nan=False))
    assert d["quantity"] == "liftoff_max_usage_rear" and d["limit"] == "<= 1.000"


# ------------------------------------------------------------------ validation


GOOD = """
[[target]]
name = "a"
quantity = "usage_rear"
condition = { max = 1.0 }
"""


@pytest.mark.parametrize(("body", "match"), [
    (GOOD.replace("usage_rear", "usage_raer"),
     r't\.toml: target\[1\]\.quantity: unknown quantity "usage_raer"; did you mean '
     r'"usage_rear"\?'),
    (GOOD.replace("max = 1.0", "maximum = 1.0"),
     r'target\[1\]\.condition: unknown condition "maximum"; did you mean "max"\?'),
    (GOOD.replace("{ max = 1.0 }", "{ range = [0.9, 0.1] }"),
     r"target\[1\]\.condition\.range: lo 0\.9 > hi 0\.1; write \[0\.1, 0\.9\]"),
    (GOOD.replace("{ max = 1.0 }", "{ range = [0.9] }"),
     r"target\[1\]\.condition\.range: range must be two numbers"),
    (GOOD.replace("{ max = 1.0 }", "{ max = 1.0, min = 0.0 }"),
     r"target\[1\]\.condition: must be a table with exactly one of"),
    (GOOD.replace("{ max = 1.0 }", '{ in = ["front"] }'),
     r'target\[1\]\.condition: "in" does not apply to usage_rear \(a number\)'),
    (GOOD + 'scope = { speed = [1, 2] }\n',
     r'target\[1\]\.scope: unknown scope key "speed"; did you mean "speed_kph"\?'),
    (GOOD + 'scope = { speed_kph = [300, 200] }\n',
     r"target\[1\]\.scope\.speed_kph: lo 300 > hi 200"),
    (GOOD + 'scope = { corners = [] }\n',
     r"target\[1\]\.scope\.corners: .* must be a non-empty list of corner numbers"),
    (GOOD + 'aggregate = "p100"\n',
     r'target\[1\]\.aggregate: unknown aggregate "p100"'),
    (GOOD + 'colour = "red"\n', r'target\[1\]: unknown key "colour"'),
    (GOOD.replace('name = "a"\n', ""), r'target\[1\]\.name: missing "name"'),
    ('[[target]]\nname = "x"\nquantity = "lap_time_s"\ncondition = { max = 90 }\n'
     'scope = { speed_kph = [1, 2] }\n',
     r"target\[1\]\.scope\.speed_kph: lap_time_s takes no scope"),
    ('[[target]]\nname = "x"\nquantity = "lap_time_s"\ncondition = { max = 90 }\n'
     'aggregate = "mean"\n', r"target\[1\]\.aggregate: lap_time_s is one value per lap"),
    ('[[target]]\nname = "x"\nquantity = "liftoff_verdict"\n'
     'condition = { not_in = ["lift-critica"] }\n',
     r'condition\.not_in: "lift-critica" is not a value of liftoff_verdict; did you mean '
     r'"lift-critical"\?'),
    ('[[target]]\nname = "x"\nquantity = "understeer_gradient_deg_per_g"\n'
     'condition = { max = 1 }\n',
     r"target\[1\]\.quantity: understeer_gradient_deg_per_g needs axle cornering "
     r"stiffnesses"),
    ("[model]\ncornering_stiffness_front_n_per_deg = 3000\n" + GOOD,
     r"model\.cornering_stiffness_rear_n_per_deg: give both axle cornering stiffnesses"),
    ("[model]\nreference_radius = 100\n" + GOOD,
     r'model\.reference_radius: unknown key; did you mean "reference_radius_m"\?'),
    ("[model]\nreference_radius_m = -5\n" + GOOD,
     r"model\.reference_radius_m: = -5 must be a number > 0"),
    ("[targets]\n", r't\.toml: targets: unknown top-level key "targets"; did you mean '
     r'"target"\?'),
    ("title = 'x'\n", r"t\.toml: target: no targets; add at least one \[\[target\]\]"),
    ("[[target]\n", r"t\.toml: not valid TOML"),
    (GOOD.replace("usage_rear", "zzzz"),
     r'unknown quantity "zzzz"; docs/targets\.md lists every quantity'),
    (GOOD + 'scope = { corner_min_speed_kph = -3 }\n',
     r"scope\.corner_min_speed_kph: = -3 must be a speed >= 0 km/h"),
    (GOOD + 'scope = "lap 3"\n', r'target\[1\]\.scope: must be "whole lap" or a table'),
    ('[[target]]\nname = "x"\nquantity = "aero_balance_vs_speed"\ncondition = { max = 1 }\n'
     'scope = { corners = [1] }\n',
     r"scope\.corners: aero_balance_vs_speed takes only speed_kph"),
    ('[[target]]\nname = "x"\nquantity = "liftoff_verdict"\ncondition = { in = ["lift-safe"] }\n'
     'aggregate = "max"\n', r'text quantity liftoff_verdict takes only aggregate "each"'),
    ("[model]\nmigration_low_speed_kph = [150, 100]\n" + GOOD,
     r"model\.migration_low_speed_kph: lo 150 > hi 100"),
])
def test_validation_messages(tmp_path, body, match):
    with pytest.raises(InputError, match=match) as e:
        T.load_targets(_write(tmp_path, body))
    assert "\n" not in str(e.value)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nope\.toml: file not found"):
        T.load_targets(tmp_path / "nope.toml")


def test_second_target_index_is_named(tmp_path):
    body = GOOD + GOOD.replace("usage_rear", "speed")
    with pytest.raises(InputError, match=r'target\[2\]\.quantity: unknown quantity "speed"'):
        T.load_targets(_write(tmp_path, body))


def test_corner_not_on_track_at_check_time(tmp_path, lap):
    ts = T.load_targets(_write(tmp_path, GOOD + "scope = { corners = [2, 9] }\n"))
    with pytest.raises(InputError, match=r"target\[1\]\.scope\.corners: corner 9 not on test "
                                         r"ring; corners on this track: 1\.\.4"):
        T.check(lap, ts)


@pytest.mark.parametrize(("scope", "what"), [
    ("{ speed_kph = [500, 600] }", "step"),
    ("{ corner_min_speed_kph = 400 }", "step"),
])
def test_empty_scope_at_check_time(tmp_path, lap, scope, what):
    ts = T.load_targets(_write(tmp_path, GOOD + f"scope = {scope}\n"))
    with pytest.raises(InputError, match=rf"target\[1\]\.scope: scope \(.*\) holds no {what} "
                                         r"on this lap \(test ring\); widen or remove it"):
        T.check(lap, ts)


def test_empty_corner_and_curve_scope(tmp_path, lap):
    body = ('[[target]]\nname = "x"\nquantity = "min_speed_kph"\ncondition = { min = 0 }\n'
            'scope = { corner_min_speed_kph = 400 }\n')
    with pytest.raises(InputError, match=r"holds no corner on this lap"):
        T.check(lap, T.load_targets(_write(tmp_path, body)))
    body = ('[[target]]\nname = "x"\nquantity = "aero_balance_vs_speed"\n'
            'condition = { min = 0 }\nscope = { speed_kph = [500, 600] }\n')
    with pytest.raises(InputError, match=r"holds no speed bin on this lap"):
        T.check(lap, T.load_targets(_write(tmp_path, body)))


def test_every_quantity_is_documented():
    doc = (ROOT / "docs" / "targets.md").read_text(encoding="utf-8")
    missing = [n for n in T.QUANTITIES if f"`{n}`" not in doc]
    assert not missing


# ------------------------------------------------------------------ CLI


@pytest.fixture
def cli(monkeypatch):
    """Run `lapbalance check` with the test track in place of a track file."""
    from lapbalance.cli import check_cmd, main

    def fake_inputs(car_file, track_file, overrides, step_m, closed):
        from lapbalance.car import load_car as _load

        return _load(car_file, overrides), _track()

    monkeypatch.setattr(check_cmd, "load_inputs", fake_inputs)

    def run(*args):
        return CliRunner().invoke(main, [str(a) for a in args])
    return run


def test_cli_exit_0_when_all_pass(tmp_path, cli):
    t = _write(tmp_path, GOOD.replace("1.0", "1.5"))
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--start-speed-kph", 150)
    assert r.exit_code == 0, r.output
    assert "PASS" in r.output and "1 of 1 targets pass" in r.output


def test_cli_exit_1_when_any_fails_after_printing(tmp_path, cli):
    t = _write(tmp_path, GOOD + '\n[[target]]\nname = "too fast"\n'
               'quantity = "top_speed_kph"\ncondition = { min = 1000 }\n')
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--start-speed-kph", 150)
    assert r.exit_code == 1
    assert "FAIL" in r.output and "1 of 2 targets pass; 1 fail" in r.output
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--json",
            "--start-speed-kph", 150)
    assert r.exit_code == 1
    d = json.loads(r.output)
    assert d["passed"] is False
    assert [x["passed"] for x in d["targets"]] == [True, False]


def test_cli_set_override_reaches_the_car(tmp_path, cli):
    t = _write(tmp_path, '[[target]]\nname = "ground balance"\n'
               'quantity = "car_aero_balance_front_ground"\n'
               'condition = { range = [0.44, 0.46] }\n')
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--start-speed-kph", 150)
    assert r.exit_code == 1
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--start-speed-kph", 150,
            "--set", "aero.balance_front=0.45")
    assert r.exit_code == 0, r.output


def test_cli_exit_2_on_bad_targets(tmp_path, cli):
    t = _write(tmp_path, GOOD.replace("usage_rear", "usage_raer"))
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t)
    assert r.exit_code == 2
    assert 'unknown quantity "usage_raer"' in r.output
    t = _write(tmp_path, GOOD + "scope = { corners = [12] }\n", "u.toml")
    r = cli("check", EXAMPLES / "gt_coupe.toml", "track.csv", t, "--start-speed-kph", 150)
    assert r.exit_code == 2 and "corner 12 not on test ring" in r.output


# ------------------------------------------------------------------ examples on the demo circuit


@pytest.fixture(scope="module")
def veldmoor():
    from lapbalance.track import load_track

    return simulate_lap(load_car(EXAMPLES / "gt_coupe.toml"),
                        load_track(ROOT / "tracks" / "veldmoor_ring.csv"))


def test_pass_example_passes_on_the_fast_circuit(veldmoor):
    out = T.check(veldmoor, T.load_targets(EXAMPLES / "targets_pass.toml"))
    assert [o.name for o in out if not o.passed] == []
    assert len(out) >= 10


def test_fail_example_fails_for_the_documented_reason(veldmoor):
    # The file's comments: only target 2 fails, because in the slow corners (1, 6, 7, 8, 11,
    # below 140 km/h) the rear's usage after lift-off ends above 0.95.
    out = T.check(veldmoor, T.load_targets(EXAMPLES / "targets_fail.toml"))
    assert [o.passed for o in out] == [True, False, True]
    bad = out[1]
    assert bad.quantity == "liftoff_max_usage_rear" and bad.measured > 0.95
    slow = [c for c in veldmoor.corners if c["min_speed_kph"] <= 140]
    assert [c["id"] for c in slow] == [1, 6, 7, 8, 11]
    assert bad.count == len(slow) and bad.failing == len(slow)
    assert bad.worst["corner"] in (1, 6, 7, 8, 11)
    assert bad.measured == pytest.approx(max(c["liftoff_max_usage_rear"] for c in slow))


def test_cli_examples_exit_codes():
    from lapbalance.cli import main

    car, track = EXAMPLES / "gt_coupe.toml", ROOT / "tracks" / "veldmoor_ring.csv"
    r = CliRunner().invoke(main, ["check", str(car), str(track),
                                  str(EXAMPLES / "targets_pass.toml")])
    assert r.exit_code == 0, r.output
    assert "targets pass" in r.output and "FAIL" not in r.output
    r = CliRunner().invoke(main, ["check", str(car), str(track),
                                  str(EXAMPLES / "targets_fail.toml")])
    assert r.exit_code == 1
    assert "hairpins keep 5 % rear grip on lift-off: 5 of 5 corners miss" in r.output
    r = CliRunner().invoke(main, ["check", str(car), str(track),
                                  str(EXAMPLES / "targets_pass.toml"), "--step-m", "0"])
    assert r.exit_code == 2 and "--step-m" in r.output


def test_docs_example_file_loads(tmp_path):
    doc = (ROOT / "docs" / "targets.md").read_text(encoding="utf-8")
    example = doc.split("```toml\n", 1)[1].split("```", 1)[0]
    (t,) = T.load_targets(_write(tmp_path, example))
    assert t.quantity == "aero_balance_front" and t.model.migration_low_speed_kph == (80, 140)


def test_liftoff_fields_point_at_their_liftoff_step(tmp_path, lap):
    o = _one(tmp_path, lap, "liftoff_max_usage_rear", "{ max = 0 }")
    c = next(c for c in lap.corners if c["id"] == o.worst["corner"])
    assert o.worst["distance_m"] == c["liftoff_worst_rear"]["distance_m"]
    o = _one(tmp_path, lap, "liftoff_max_shift", "{ max = 0 }")
    c = next(c for c in lap.corners if c["id"] == o.worst["corner"])
    assert o.worst["distance_m"] == c["liftoff_worst_shift"]["distance_m"]
