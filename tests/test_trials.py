"""Trials end to end: determinism, outcomes on the demo models, closed-loop rolling, steering
residuals on measured contacts, slip against the true surface speed, and blow-ups as `invalid`."""

import math
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest
from physics_scenes import ball_between_rollers, one_object, roller_hand

from harness.sim.contact import sample_contacts
from harness.models.grippers import build_models
from harness.sim.metrics import blowup
from harness.models.objects import generate
from harness.sim.phases import STEER_RTOL, roller_contacts
from harness.sim.routines import _GRASPED, ROUTINES, make_routine
from harness.models.specs import load_any, load_gripper
from harness.sim.steering import steer
from harness.sim.trial import Perturbation, TrialContext, run_trial
from harness.sim.engines import open_world

MODELS = Path(__file__).resolve().parents[1] / "models"


@lru_cache(maxsize=None)
def gripper(name):
    return build_models(load_gripper(MODELS / "grippers" / f"{name}.toml"))[0]


@lru_cache(maxsize=None)
def lab_cell():
    return tuple(generate(load_any(MODELS / "objects" / "lab-cell.toml")))


def instance(name):
    return next(i for i in lab_cell() if i.name == name)


def same_row(a, b):
    """Rows equal in every value (NaN equal to NaN) except the wall time."""
    assert a.keys() == b.keys()
    for key in a:
        if key == "wall_s":
            continue
        x, y = a[key], b[key]
        assert (x == y) or (isinstance(x, float) and math.isnan(x) and math.isnan(y)), key


def test_a_trial_depends_only_on_its_inputs_and_seed():
    # Determinism (the engine is bit-reproducible for the same commands in the same order): a fresh
    # world and a reused, reset world give identical rows, also after another trial ran in it.
    pert = Perturbation(object_dx=0.002, object_yaw=0.3, friction_scale=0.9, wrist_dy=-0.001,
                        actuator_lag=0.02, speed_noise=0.1)
    routine = make_routine("draw-in-grasp")
    first = run_trial(gripper("duo-roller"), instance("vial-1"), routine, pert, seed=7)
    with open_world() as world:
        run_trial(gripper("scissor-roller"), instance("ball"), routine, seed=1, world=world)
        again = run_trial(gripper("duo-roller"), instance("vial-1"), routine, pert, seed=7, world=world)
    same_row(first, again)
    assert first["pert_object_dx_mm"] == pytest.approx(2.0) and first["pert_object_yaw_deg"] == pytest.approx(17.19, abs=0.01)
    assert first["pert_actuator_lag_s"] == 0.02 and "pert_actuator_lag" not in first


def test_draw_in_grasp_picks_most_lab_cell_objects_and_grippers_differ():
    # The demo scenario: the roller grippers draw most lab-cell objects off the table and hold them;
    # the two designs do not behave alike, and objects differ in difficulty.
    routine = make_routine("draw-in-grasp")
    rows = {g: [run_trial(gripper(g), o, routine, seed=0) for o in lab_cell()] for g in ("duo-roller", "scissor-roller")}
    held = {g: sum(r["outcome"] == "held" for r in rs) for g, rs in rows.items()}
    n = len(lab_cell())
    assert sum(held.values()) > n  # more than half of all 2 x 14 trials
    assert min(held.values()) >= 0.4 * n
    outcomes = {g: [r["outcome"] for r in rs] for g, rs in rows.items()}
    assert outcomes["duo-roller"] != outcomes["scissor-roller"]
    assert len(set(outcomes["duo-roller"])) > 1
    for r in rows["duo-roller"]:
        assert r["outcome"] in ("held", "missed", "dropped", "ejected", "stalled", "invalid")
        if r["outcome"] == "held":
            assert r["epsilon"] >= 0 and r["hold_ok"] and r["time_to_grasp_s"] > 0
            assert r["drift_mm"] < 5.0  # a held object stays put in the hand during the hold


def test_pinch_lift_baseline_runs_on_the_jaw_and_roller_routines_do_not():
    routine = make_routine("pinch-lift")
    rows = [run_trial(gripper("pad-jaw"), o, routine, seed=0) for o in lab_cell()[:8]]
    assert sum(r["outcome"] == "held" for r in rows) >= 5
    for name in ROUTINES:
        reason = make_routine(name).unsuitable(gripper("pad-jaw"), instance("vial-0"))
        assert (reason is None) == (name == "pinch-lift"), name


@pytest.mark.parametrize("name", ["duo-roller", "scissor-roller"])
@pytest.mark.xfail(strict=True, reason="held only at 480 Hz: at 960 and 1920 Hz (100 and 400 it) both hands spread "
                   "against the wall and the cup stays on the table (lift raises it 0.0 mm); the 480 Hz hold "
                   "measured the solver, and why the spread grip slides at finer steps is not yet known")
def test_inside_grasp_holds_a_cup_from_inside(name):
    # Fingers pre-shaped to fit the bore, lowered into the cup and spread against its inner wall
    # lift it and hold it (a 60 mm cup with 4 mm walls; measured drift under 1 mm at 480 Hz).
    cup = one_object("cup", outer_radius_mm=30, wall_mm=4, height_mm=45, base_mm=3, density_kg_m3=1200, friction=0.5)
    row = run_trial(gripper(name), cup, make_routine("inside-grasp"), seed=0)
    assert row["outcome"] == "held", row["reason"]
    assert row["spread_ok"] and row["drift_mm"] < 2.0


def test_inside_grasp_needs_a_cavity():
    routine = make_routine("inside-grasp")
    assert "ring or a cup" in routine.unsuitable(gripper("duo-roller"), instance("vial-0"))
    assert routine.unsuitable(gripper("duo-roller"), instance("seal-ring")) is None


@pytest.mark.parametrize("axis", [(1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0), (1.0, 1.0, 0.0)])
def test_scissor_roller_rolls_a_held_ball_about_several_axes(axis):
    # Closed-loop roller steering (grasp map, Murray, Li and Sastry 1994, ch. 5): the four-roller
    # hand turns a held ball 90 deg about a hand axis with the rollers alone, within 5 deg
    # (measured at the default physics: 88.6, 87.1, 89.5 and 88.0 deg, drift at most 3.7 deg and
    # 3.5 mm; at 400 it @ 960 Hz: 91.5, 86.7, 89.9 and 89.4 deg, and 88.2 about (1, 0, 1)), and the
    # ball stays within a few mm of its place.
    routine = make_routine("roll", {"axis": list(axis), "angle_deg": 90})
    row = run_trial(gripper("scissor-roller"), instance("ball"), routine, seed=0)
    assert row["outcome"] == "held", row["reason"]
    assert row["rotation_deg"] == pytest.approx(90.0, abs=5.0)
    assert row["roll_drift_deg"] < 5.0 and row["roll_drift_mm"] < 5.0


def test_steering_residual_on_measured_contacts_of_a_held_ball():
    # With four rollers pressing a ball from four horizontal directions, any spin of the ball
    # keeps its contacts (normals through the centre) and is producible; a sideways translation
    # pushes into a roller, which no roller setting can do (non-holonomic / unilateral part).
    routine = make_routine("roll")
    with open_world() as world:
        ctx = TrialContext(world, gripper("scissor-roller"), instance("ball"), Perturbation(), 0)
        for phase, _ in _GRASPED:
            assert phase(ctx, routine.params, ctx.begin(phase.__name__))
        found = [c for _, c in roller_contacts(ctx)]
        centre = world.pose(ctx.obj)[0]
    assert len(found) == 4
    spin = steer([0, 0, 0, 0.0, 0.0, 1.0], centre, found, 0.02, rtol=STEER_RTOL)
    push = steer([0.01, 0, 0, 0, 0, 0], centre, found, 0.02, rtol=STEER_RTOL)
    assert spin.residual_norm < 0.02 * 0.02 * 1.0  # under 2 % of the commanded 0.02 m/s (L x w)
    assert push.residual_norm == pytest.approx(0.01, rel=0.1)


@pytest.mark.parametrize("mu", [0.05, 0.2])
def test_slip_equals_the_true_surface_speed_when_friction_cannot_carry_the_load(mu):
    # A ball held fixed (an immovable load) between spinning rollers: nothing can move it, so each
    # roller's surface slides past the ball at the roller's own speed times its radius: the surface
    # speed of a body turning at w about a fixed axis is w r (rigid-body kinematics, v = w x r;
    # Meriam and Kraige, "Engineering Mechanics: Dynamics", rotation about a fixed axis; recalled
    # from memory), taken from the joint's measured speed, independent of the link velocities the
    # slip metric uses. Measured: within 0.5 %; the issue asks for 10 %.
    with open_world() as world:
        model = roller_hand(friction=mu)
        hand, ball = ball_between_rollers(world, model, one_object("sphere", radius_mm=20, mass_g=30, friction=mu),
                                          fixed=True)
        hand.set_rollers(6.0)
        measured, true = [], []
        for k in range(180):
            hand.close()
            world.step()
            sample = sample_contacts(world, ball, hand.body)
            if k > 60 and sample.count:
                measured.append(sample.slip_speed().max())
                true.append(hand.joint_speeds(hand.roll_j).mean() * model.roller_radius)
    assert len(measured) > 100
    assert np.mean(measured) == pytest.approx(np.mean(true), rel=0.10)


def test_a_blow_up_is_invalid_not_a_design_failure():
    # An absurdly soft object (1 N/m) sinks through the table: the engine cannot be trusted there,
    # so the trial is `invalid` (excluded from success rates), not `dropped`.
    soft = one_object("sphere", radius_mm=20, mass_g=30, friction=0.7, stiffness_n_m=1, damping_n_s_m=0.01)
    row = run_trial(gripper("pad-jaw"), soft, make_routine("pinch-lift"), seed=0)
    assert row["outcome"] == "invalid" and not row["success"]
    assert "table" in row["reason"]


@pytest.mark.parametrize("state, why", [
    ((np.array([0, 0, math.nan]), np.zeros(3), np.zeros(3), np.zeros(0)), "non-finite"),
    ((np.zeros(3), np.array([9.0, 0, 0]), np.zeros(3), np.zeros(0)), "energy jump"),
    ((np.zeros(3), np.zeros(3), np.zeros(3), np.array([0.001, 0.006])), "interpenetration"),
])
def test_blowup_checks(state, why):
    assert why in blowup(*state, (0.04, 0.04, 0.04))
    assert blowup(np.zeros(3), np.zeros(3), np.zeros(3), np.array([0.001]), (0.04, 0.04, 0.04)) is None


def test_bad_routine_parameters_are_reported_together():
    from harness.errors import SpecError
    with pytest.raises(SpecError) as err:
        make_routine("roll", {"angle_deg": -5, "axis": [0, 0], "spin": 1})
    text = str(err.value)
    assert "angle_deg" in text and "axis" in text and "spin" in text
    with pytest.raises(SpecError, match="must be one of"):
        make_routine("twirl")
