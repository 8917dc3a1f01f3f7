"""Draw-in from the work surface (routine `surface-draw-in`): rollers pressed on the table with a
preload straddle a low part, turn so their surfaces at it move inward and upward, and the part
climbs into the hand (the rolling-mill bite condition, see tests/test_bite_reference.py)."""

import re
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest

from harness.errors import SpecError
from harness.models.grippers import build_models
from harness.models.objects import generate
from harness.sim.routines import make_routine
from harness.models.specs import load_any, load_gripper
from harness.sim.trial import run_trial
from harness.sim.world import PhysicsSettings

MODELS = Path(__file__).resolve().parents[1] / "models"


@lru_cache(maxsize=None)
def own(name):
    """The spec's own variant (duo-roller: 12 mm rollers)."""
    spec = load_gripper(MODELS / "grippers" / f"{name}.toml")
    models = build_models(spec)
    return next((m for m in models if m.name == spec.own), models[0])


@lru_cache(maxsize=None)
def objects(set_name):
    return {o.name: o for o in generate(load_any(MODELS / "objects" / f"{set_name}.toml"))}


@pytest.mark.parametrize("name", ["screw-cap-0", "screw-cap-1", "sample-tube-0", "sample-tube-1", "seal-ring"])
def test_duo_roller_picks_low_lab_cell_parts_off_the_table(name):
    # the ordinary draw-in grasp misses all of these (its tips stay 3 mm above the table and meet
    # them at or above their top); nominal trials at the default physics
    row = run_trial(own("duo-roller"), objects("lab-cell")[name], make_routine("surface-draw-in"), seed=0)
    assert row["outcome"] == "held", row["reason"]
    assert row["touch-down_ok"] and row["straddle_ok"] and row["climb_ok"] and row["hold_ok"]


@pytest.mark.parametrize("name,geometry", [
    # a 1.5 mm plate edge meets a 12 mm roller at theta from its lowest point, cos(theta) = (r - h)/r
    # = 10.5/12, so drawing it in needs mu > cot(theta) = 10.5/sqrt(12^2 - 10.5^2) = 1.81 (rigid contact);
    # the pair's mu is sqrt(1.0 x 0.35) = 0.59
    ("cover-slip", "object top 1.5 mm: 12 mm rollers on the surface meet its edge 61 deg below level, drawing in "
                   "needs mu > 1.81, the pair's mu is 0.59"),
    # a 1.2 mm washer edge: cos(theta) = 10.8/12, cot(theta) = 2.06; pair sqrt(0.3) = 0.55
    ("washer", "object top 1.2 mm: 12 mm rollers on the surface meet its edge 64 deg below level, drawing in needs "
               "mu > 2.06, the pair's mu is 0.55"),
    # a 2.69 mm bead lying between 12 mm rollers: sin(beta) = (12 - 2.69)/(12 + 2.69), tan(beta) = 0.82;
    # pair sqrt(0.6) = 0.77
    ("bead-0", "object top 5.4 mm: 12 mm rollers on the surface meet it 39 deg below level, drawing in needs "
               "mu > 0.82, the pair's mu is 0.77"),
])
def test_thin_and_small_stress_parts_are_missed_with_the_bite_condition_in_numbers(name, geometry):
    # rolling-mill angle of bite (Dieter, Mechanical Metallurgy, chapter on rolling); values worked by
    # hand. A compliant tread would meet the edge over a patch rather than at its corner, which turns
    # the mean normal toward level and lowers the need somewhat; the rigid figure is the stated one.
    # The reason also gives the engine's own normals at the first touch (steeper than the geometry
    # at a rim, 74 to 88 deg, measured).
    row = run_trial(own("duo-roller"), objects("stress")[name], make_routine("surface-draw-in"), seed=0)
    assert row["outcome"] == "missed"
    assert row["reason"].startswith("climb failed") and "at first touch the roller contact normals were" in row["reason"]
    assert row["reason"].endswith("; from geometry, " + geometry), row["reason"]


def test_the_jaw_has_no_rollers_to_draw_in_with():
    reason = make_routine("surface-draw-in").unsuitable(own("pad-jaw"), objects("lab-cell")["screw-cap-0"])
    assert reason.startswith("needs driven rollers")


def test_surface_draw_in_parameters_are_checked_before_any_trial():
    with pytest.raises(SpecError) as exc:
        make_routine("surface-draw-in", {"preload_n": -1, "close_share": 2, "surface_speed_mm_s": 0}, file="c.toml",
                     prefix="routine.surface-draw-in")
    text = str(exc.value)
    assert "c.toml: field 'routine.surface-draw-in.preload_n' must be a number > 0 and <= 50; got -1" in text
    assert "'routine.surface-draw-in.close_share' must be a number > 0 and <= 1; got 2" in text
    assert "'routine.surface-draw-in.surface_speed_mm_s' must be a number > 0; got 0" in text


def test_draw_in_grasp_reports_an_object_below_the_tips_reach_in_numbers():
    row = run_trial(own("duo-roller"), objects("stress")["washer"], make_routine("draw-in-grasp"), seed=0)
    assert row["outcome"] == "missed"
    found = re.fullmatch(r"approach failed: object top (\d+\.\d) mm, lowest fingertip reach (\d+\.\d) mm "
                         r"\(surface-draw-in picks parts this low\)", row["reason"])
    assert found, row["reason"]
    top, reach = map(float, found.groups())
    # the washer is 1.2 mm thick (stress set); the top is read from the engine's bounding box, which
    # adds its collision margin (1.5 mm at 240 Hz, 1.6 mm at 480 Hz, measured); the tips stop 3 mm
    # above the table (trial.TABLE_CLEARANCE)
    assert 1.2 <= top <= 1.7 and reach == 3.0


# --- reach from geometry, before any trial (Routine.reach; plan and show print it) -----------------

def test_reach_from_geometry_names_the_low_parts_each_routine_misses():
    duo = own("duo-roller")
    washer, slip, cap = objects("stress")["washer"], objects("stress")["cover-slip"], objects("lab-cell")["screw-cap-0"]
    # the washer is 1.2 mm thick, the tips stop 3 mm over the table (trial.TABLE_CLEARANCE)
    assert make_routine("draw-in-grasp").reach(duo, washer) == (
        "object top 1.2 mm, lowest fingertip reach 3.0 mm (surface-draw-in picks parts this low)")
    # a 1.5 mm edge against a 12 mm roller: cos(theta) = (12 - 1.5)/12, cot(theta) = 10.5/sqrt(12^2 - 10.5^2)
    # = 1.81 (rolling-mill angle of bite; worked by hand); pair mu sqrt(1.0 x 0.35) = 0.59
    assert make_routine("surface-draw-in").reach(duo, slip) == (
        "object top 1.5 mm: 12 mm rollers on the surface meet its edge 61 deg below level, drawing in needs "
        "mu > 1.81, the pair's mu is 0.59")
    assert make_routine("surface-draw-in").reach(duo, cap) is None
    # the cap is 10.6 mm tall; a 12 mm roller 3 mm over the table has its centre at 15 mm, above the
    # cap's top, so it meets only the cap's top edge
    assert make_routine("draw-in-grasp").reach(duo, cap) == (
        "object top 10.6 mm, the rollers' centres stay above 12 + 3 = 15.0 mm: they would meet only its top edge "
        "(surface-draw-in picks parts this low)")
    assert make_routine("draw-in-grasp").reach(duo, objects("lab-cell")["vial-0"]) is None


def test_plan_and_show_tell_reach_before_simulating(tmp_path, capsys):
    from harness.cli import main
    campaign = tmp_path / "c.toml"
    campaign.write_text(f'''name = "reach"
seed = 1
trials = 1
root = "{MODELS.parent}"
objects = ["models/objects/stress.toml"]
[[gripper]]
spec = "models/grippers/duo-roller.toml"
variants = ["duo-roller[finger.roller.radius_mm=12]"]
[[routine]]
name = "surface-draw-in"
''')
    assert main(["plan", str(campaign)]) == 0
    out = capsys.readouterr().out
    assert "cell(s) should miss from geometry alone" in out
    assert ("surface-draw-in / duo-roller[finger.roller.radius_mm=12] / washer: object top 1.2 mm: 12 mm rollers "
            "on the surface meet its edge 64 deg below level, drawing in needs mu > 2.06") in out
    assert main(["show", str(MODELS / "grippers" / "duo-roller.toml")]) == 0
    # at mu = 1 the bite angle is 45 deg: a lying cylinder from 2r (1 - sin 45)/(1 + sin 45) = 4.1 mm across,
    # an edge from r (1 - sin 45) = 3.5 mm (r = 12 mm; worked by hand)
    assert "lying 4.1 / edge 3.5" in capsys.readouterr().out
    assert main(["show", str(MODELS / "objects" / "stress.toml")]) == 0
    assert "top_mm" in capsys.readouterr().out


def test_the_approach_finds_every_demo_objects_top_and_sections_from_its_collision_geometry():
    # the draw-in approach aims at the widest section of the object's collision geometry the tips
    # reach (phases.section_widths); it needs the object's true top: the engine's bounding box of a
    # turned convex hull is the hull's own box turned (a resting 21 mm polytope had a 36 mm box, and
    # every section ray passed over it), so the top comes from rays cast down over the part
    from harness.sim.engines import open_world
    from harness.sim.phases import section_widths
    from harness.sim.trial import rest_height
    from harness.sim.trial import BOX_EXCESS, Perturbation, TrialContext
    duo = own("duo-roller")
    with open_world(PhysicsSettings()) as world:
        for set_name in ("lab-cell", "stress"):
            for inst in objects(set_name).values():
                world.reset()
                ctx = TrialContext(world, duo, inst, Perturbation(), 0)
                top = ctx.object_top()
                # the part's resting height plus the engine's collision margins (hulls: 1 mm at the table
                # and 1 mm at the top, measured), up to BOX_EXCESS more where the box is kept; a random
                # polytope tips onto a face as it settles, lower than it was generated
                low = 0.0 if inst.kind == "polytope" else rest_height(inst) - 0.0005
                assert low <= top <= rest_height(inst) + 0.0025 + BOX_EXCESS, (inst.name, top)
                if inst.kind == "polytope":  # its box stands 15 to 26 mm above it
                    assert top < world.aabb(ctx.obj)[1][2] - 0.01, inst.name
                heights = np.linspace(0.2 * top, 0.9 * top, 8)
                assert section_widths(ctx, heights).max() > 0, f"{inst.name}: no section ray meets it"


def test_rollers_slide_on_a_part_they_cannot_bite_and_roll_it_up_when_they_can():
    # Below the bite condition the rollers' surfaces slide past the part: friction is used to its
    # Coulomb limit (use = |F| / mu N = 1) and the climb's slip is about the surface speed times the
    # time the climb waits (15 mm/s); well above it the part rolls up the rollers, sticking (use < 1,
    # little slip). Lying 14 mm cylinders, mu = 0.7 and 1.5 tan(beta); measured at 100 it @ 480 Hz:
    # use 0.97 / 0.59, slip 8.7 / 1.5 mm; at 400 it @ 960 Hz: 0.95 / 0.42, 8.3 / 0.07 mm.
    import math

    from harness.campaigns.envelope import EnvelopePoint, part
    from harness.sim.bite import required_mu
    from harness.sim.trial import Perturbation
    h = 0.014
    need = required_mu("cylinder", 0.012, h)
    rows = {k: run_trial(own("duo-roller"), part(EnvelopePoint("cylinder", h, k * need), 1.0),
                         make_routine("surface-draw-in"), Perturbation(object_yaw=math.pi / 2), seed=0)
            for k in (0.7, 1.5)}
    sliding, rolling = rows[0.7], rows[1.5]
    assert sliding["outcome"] == "missed" and rolling["outcome"] == "held"
    assert sliding["climb_friction_use_mean"] > 0.9 and sliding["climb_slip_mm"] > 5.0
    assert rolling["climb_friction_use_mean"] < 0.8 and rolling["climb_slip_mm"] < 3.0


def test_a_part_taller_than_the_rollers_is_gripped_at_or_above_its_centre_without_drawing_in():
    # a 44 mm vial's centre stands above the roller centres (12 mm) from the start: there is nothing
    # to draw in, the rollers grip it and the lift takes it off the table
    row = run_trial(own("duo-roller"), objects("lab-cell")["vial-2"], make_routine("surface-draw-in"), seed=0)
    assert row["outcome"] == "held", row["reason"]
    assert row["climb_ok"] and row["climb_slip_mm"] < 1.0
