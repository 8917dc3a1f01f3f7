"""Generated models load in independent tools and say what their specs say.

Every gripper variant (roller-finger, jaw and a `urdf` family spec written here) and every object
instance of the demo sets is written with harness.models.build.materialise, parsed with yourdfpy (an
independent URDF library) and loaded in pybullet. Expected values are read from the TOML files
with tomllib, not through harness's own spec parser.
"""

from __future__ import annotations

import copy
import functools
import hashlib
import math
import os
import shutil
import subprocess
import sys
import textwrap
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pybullet as p
import pytest
import yourdfpy

from harness.models.build import materialise
from harness.models.grippers import build_models
from harness.models.objects import generate
from harness.models.specs import load_any

ROOT = Path(__file__).resolve().parents[1]
GRIPPER_DIR = ROOT / "models" / "grippers"
OBJECT_DIR = ROOT / "models" / "objects"
GRIPPER_FILES = ("duo-roller.toml", "scissor-roller.toml", "pad-jaw.toml")
OBJECT_SET_FILES = ("lab-cell.toml", "stress.toml")
LOAD_FLAGS = p.URDF_USE_INERTIA_FROM_FILE | p.URDF_USE_IMPLICIT_CYLINDER

WRITTEN = 1e-9  # URDF numbers are printed with 10 significant digits
PB_POSITION = 1e-6  # m; pybullet's getLinkState poses carry single-precision round-off (~1e-8 m here)
DEG = math.pi / 180.0  # unit conversions (SI definitions)
RPM = 2.0 * math.pi / 60.0


# --- collected cases ----------------------------------------------------------------------------

@functools.lru_cache(maxsize=None)
def gripper_cases():
    """{model name: (spec file, variant, model)} for every variant of every demo gripper spec."""
    out = {}
    for fname in GRIPPER_FILES:
        spec = load_any(GRIPPER_DIR / fname)
        for variant, model in zip(spec.variants, build_models(spec)):
            out[model.name] = (GRIPPER_DIR / fname, variant, model)
    return out


def roller_cases():
    return sorted(k for k, (_, _, m) in gripper_cases().items() if m.family == "roller-finger")


@functools.lru_cache(maxsize=None)
def object_cases():
    """{"set:instance": (set file, entry, instance)} for both demo object sets."""
    out = {}
    for fname in OBJECT_SET_FILES:
        object_set = load_any(OBJECT_DIR / fname)
        entries = {e.name: e for e in object_set.entries}
        for inst in generate(object_set):
            out[f"{object_set.name}:{inst.name}"] = (OBJECT_DIR / fname, entries[inst.entry], inst)
    return out


def raw_variant(spec_file, variant):
    """The spec's TOML table with the variant's sweep values written in (independent of harness's parser)."""
    raw = tomllib.loads(Path(spec_file).read_text())
    table = copy.deepcopy(raw)
    for key, value in variant.sweep:
        *path, last = key.split(".")
        t = table
        for part in path:
            t = t[part]
        t[last] = value
    return table


# --- the pybullet client: one per module --------------------------------------------------------

@pytest.fixture(scope="module")
def pb():
    cid = p.connect(p.DIRECT)
    try:
        yield cid
    finally:
        p.disconnect(physicsClientId=cid)


@pytest.fixture
def sim(pb):
    """A clean world on the module's client for each test."""
    p.resetSimulation(physicsClientId=pb)
    return pb


def load_model(cid, model, folder):
    """Write a GripperModel into `folder` and load it with a fixed base."""
    return load_pb(cid, materialise(model.name, model.urdf, model.files, folder), fixed=True)


def load_pb(cid, path, fixed=False):
    body = p.loadURDF(str(path), flags=LOAD_FLAGS, useFixedBase=fixed, physicsClientId=cid)
    assert body >= 0, f"pybullet could not load {path}"
    return body


def pb_links(cid, body):
    """{link name: pybullet link index} (the base is -1)."""
    out = {p.getBodyInfo(body, physicsClientId=cid)[0].decode(): -1}
    for j in range(p.getNumJoints(body, physicsClientId=cid)):
        out[p.getJointInfo(body, j, physicsClientId=cid)[12].decode()] = j
    return out


def pb_joints(cid, body):
    """{joint name: getJointInfo tuple}."""
    return {info[1].decode(): info for info in
            (p.getJointInfo(body, j, physicsClientId=cid) for j in range(p.getNumJoints(body, physicsClientId=cid)))}


# --- loading every model in two independent tools -----------------------------------------------

PB_TYPES = {"revolute": p.JOINT_REVOLUTE, "continuous": p.JOINT_REVOLUTE, "prismatic": p.JOINT_PRISMATIC,
            "fixed": p.JOINT_FIXED}


def check_loads(cid, name, urdf, files, root):
    """Materialise, parse with yourdfpy (strict validation), load in pybullet, and compare the two:
    same links and joints, pybullet's mass, COM and principal inertia of every link = the URDF's."""
    path = materialise(name, urdf, files, root)
    assert path.read_text() == urdf
    for rel, data in files.items():
        assert (path.parent / rel).read_bytes() == data
    model = yourdfpy.URDF.load(str(path), build_scene_graph=True, load_meshes=False)
    assert model.validate(), model.errors if hasattr(model, "errors") else model._errors
    for link in model.robot.links:
        for item in [*link.visuals, *link.collisions]:
            if item.geometry.mesh is not None:
                assert (path.parent / item.geometry.mesh.filename).is_file()
    body = load_pb(cid, path)
    links = pb_links(cid, body)
    assert set(links) == {lk.name for lk in model.robot.links}
    joints = pb_joints(cid, body)
    assert set(joints) == {j.name for j in model.robot.joints}
    for j in model.robot.joints:
        assert joints[j.name][2] == PB_TYPES[j.type], j.name
    for lk in model.robot.links:
        if lk.inertial is None:
            continue
        info = p.getDynamicsInfo(body, links[lk.name], physicsClientId=cid)
        assert info[0] == pytest.approx(lk.inertial.mass, rel=1e-12), lk.name
        # pybullet keeps the inertia diagonalised: its principal moments are the URDF tensor's eigenvalues
        want = np.linalg.eigvalsh(lk.inertial.inertia)
        np.testing.assert_allclose(sorted(info[2]), want, rtol=1e-6, atol=1e-9 * want.max(), err_msg=lk.name)
        np.testing.assert_allclose(info[3], lk.inertial.origin[:3, 3], atol=1e-12, err_msg=lk.name)
    return path, model, body


@pytest.mark.parametrize("key", sorted(gripper_cases()))
def test_gripper_loads(key, sim, tmp_path):
    _, _, model = gripper_cases()[key]
    _, parsed, body = check_loads(sim, model.name, model.urdf, model.files, tmp_path)
    joint_names = {j.name for j in parsed.robot.joints}
    for role in (model.close_joints, model.pivot_joints, model.roll_joints):
        assert set(role) <= joint_names
    assert set(model.surfaces) <= {lk.name for lk in parsed.robot.links}


@pytest.mark.parametrize("key", sorted(object_cases()))
def test_object_loads(key, sim, tmp_path):
    _, _, inst = object_cases()[key]
    _, parsed, body = check_loads(sim, inst.name, inst.urdf, inst.files, tmp_path)
    assert len(parsed.robot.links) == 1 and not parsed.robot.joints
    # the collision shapes pybullet built have the URDF's primitive sizes
    link = parsed.robot.links[0]
    prims = [c.geometry for c in link.collisions if c.geometry.mesh is None]
    shapes = p.getCollisionShapeData(body, -1, physicsClientId=sim)
    if len(link.collisions) == 1 and prims:
        (shape,) = shapes
        g = prims[0]
        if g.sphere is not None:
            assert shape[2] == p.GEOM_SPHERE and shape[3][0] == pytest.approx(g.sphere.radius, rel=1e-12)
        elif g.cylinder is not None:  # pybullet reports (length, radius, 0)
            assert shape[2] == p.GEOM_CYLINDER
            assert shape[3][:2] == pytest.approx((g.cylinder.length, g.cylinder.radius), rel=1e-12)
        else:
            assert shape[2] == p.GEOM_BOX and shape[3] == pytest.approx(tuple(g.box.size), rel=1e-12)


# --- a `urdf` family spec (bring your own URDF) -------------------------------------------------

HAND_URDF = """<?xml version="1.0"?>
<robot name="tmp-hand">
  <link name="base">
    <inertial><origin xyz="0 0 -0.01" rpy="0 0 0"/><mass value="0.3"/>
      <inertia ixx="1e-4" ixy="0" ixz="0" iyy="2e-4" iyz="0" izz="2.5e-4"/></inertial>
    <collision><origin xyz="0 0 -0.01" rpy="0 0 0"/><geometry><box size="0.08 0.04 0.02"/></geometry></collision>
  </link>
  <joint name="close_a" type="revolute">
    <parent link="base"/><child link="finger"/>
    <origin xyz="0.03 0 0" rpy="0 0 0"/><axis xyz="0 -1 0"/>
    <limit lower="-0.2" upper="0.9" effort="1.5" velocity="2.0"/>
  </joint>
  <link name="finger">
    <inertial><origin xyz="0 0 0.03" rpy="0 0 0"/><mass value="0.05"/>
      <inertia ixx="2e-5" ixy="0" ixz="0" iyy="2e-5" iyz="0" izz="2e-6"/></inertial>
    <visual><origin xyz="0 0 0.03" rpy="0 0 0"/><geometry><mesh filename="meshes/finger.obj"/></geometry></visual>
    <collision><origin xyz="0 0 0.03" rpy="0 0 0"/><geometry><mesh filename="meshes/finger.obj"/></geometry></collision>
  </link>
  <joint name="spin_a" type="continuous">
    <parent link="finger"/><child link="roller"/>
    <origin xyz="0 0 0.07" rpy="0 0 0"/><axis xyz="0 -1 0"/>
    <limit effort="0.2" velocity="12.0"/>
  </joint>
  <link name="roller">
    <inertial><origin xyz="0 0 0" rpy="0 0 0"/><mass value="0.02"/>
      <inertia ixx="1e-6" ixy="0" ixz="0" iyy="1e-6" iyz="0" izz="1e-6"/></inertial>
    <collision><origin xyz="0 0 0" rpy="1.5707963268 0 0"/><geometry><cylinder radius="0.01" length="0.015"/></geometry></collision>
  </link>
</robot>
"""

FINGER_OBJ = "\n".join(
    [f"v {x} {y} {z}" for x in (-0.005, 0.005) for y in (-0.008, 0.008) for z in (-0.03, 0.03)]
    + ["f 1 2 4", "f 1 4 3", "f 5 7 8", "f 5 8 6", "f 1 5 6", "f 1 6 2",
       "f 3 4 8", "f 3 8 7", "f 1 3 7", "f 1 7 5", "f 2 6 8", "f 2 8 4"]) + "\n"

HAND_SPEC = """family = "urdf"
name = "tmp-hand"
urdf = "hand.urdf"

[roles]
close = ["close_a"]
roll = ["spin_a"]
roller_radius_mm = 10
"""


@pytest.fixture
def urdf_family_model(tmp_path):
    src = tmp_path / "spec"
    (src / "meshes").mkdir(parents=True)
    (src / "hand.urdf").write_text(HAND_URDF)
    (src / "meshes" / "finger.obj").write_text(FINGER_OBJ)
    (src / "hand.toml").write_text(HAND_SPEC)
    spec = load_any(src / "hand.toml")
    (model,) = build_models(spec)
    return model


def test_urdf_family_loads(urdf_family_model, sim, tmp_path):
    model = urdf_family_model
    assert model.family == "urdf"
    assert model.close_joints == ("close_a",) and model.roll_joints == ("spin_a",)
    assert model.roller_radius == pytest.approx(0.010, rel=1e-12)
    assert model.files == {"meshes/finger.obj": FINGER_OBJ.encode()}
    path, parsed, body = check_loads(sim, model.name, model.urdf, model.files, tmp_path / "built")
    joints = pb_joints(sim, body)
    # the user's limits arrive unchanged
    assert joints["close_a"][8:12] == pytest.approx((-0.2, 0.9, 1.5, 2.0), rel=1e-12)
    assert joints["spin_a"][10:12] == pytest.approx((0.2, 12.0), rel=1e-12)
    assert joints["spin_a"][9] < joints["spin_a"][8]  # pybullet marks an unlimited joint with upper < lower
    roller = pb_links(sim, body)["roller"]
    (shape,) = p.getCollisionShapeData(body, roller, physicsClientId=sim)
    assert shape[2] == p.GEOM_CYLINDER and shape[3][1] == pytest.approx(model.roller_radius, rel=1e-12)


# --- roller-finger: joints, limits, roller radius -----------------------------------------------

def urdf_joints(text):
    return {j.get("name"): j for j in ET.fromstring(text).findall("joint")}


@pytest.mark.parametrize("key", roller_cases())
def test_roller_finger_joints_match_spec(key, sim, tmp_path):
    spec_file, variant, model = gripper_cases()[key]
    raw = raw_variant(spec_file, variant)["finger"]
    flex, pivot, roller = raw["flex"], raw["pivot"], raw["roller"]
    want = {
        "flex": ("revolute", flex["lower_deg"] * DEG, flex["upper_deg"] * DEG, flex["torque_nm"],
                 flex["speed_deg_s"] * DEG),
        "pivot": ("revolute", pivot["lower_deg"] * DEG, pivot["upper_deg"] * DEG, pivot["torque_nm"],
                  pivot["speed_deg_s"] * DEG),
        "roll": ("continuous", None, None, roller["torque_nm"], roller["speed_rpm"] * RPM),
    }
    path = materialise(model.name, model.urdf, model.files, tmp_path)
    parsed = {j.name: j for j in yourdfpy.URDF.load(str(path), build_scene_graph=False,
                                                    load_meshes=False).robot.joints}
    body = load_pb(sim, path)
    info = pb_joints(sim, body)
    n = raw["count"]
    movable = {name for name, j in parsed.items() if j.type != "fixed"}
    assert movable == {f"finger{i}_{r}" for i in range(n) for r in ("flex", "pivot", "roll")}
    for i in range(n):
        for role, (kind, lower, upper, effort, velocity) in want.items():
            name = f"finger{i}_{role}"
            j = parsed[name]
            assert j.type == kind, name
            assert (j.limit.effort, j.limit.velocity) == pytest.approx((effort, velocity), rel=WRITTEN), name
            assert info[name][10:12] == pytest.approx((effort, velocity), rel=WRITTEN), name
            if lower is not None:
                assert (j.limit.lower, j.limit.upper) == pytest.approx((lower, upper), rel=WRITTEN, abs=1e-12), name
                assert info[name][8:10] == pytest.approx((lower, upper), rel=WRITTEN, abs=1e-12), name
    assert model.close_joints == tuple(f"finger{i}_flex" for i in range(n))
    assert model.pivot_joints == tuple(f"finger{i}_pivot" for i in range(n))
    assert model.roll_joints == tuple(f"finger{i}_roll" for i in range(n))


@pytest.mark.parametrize("key", roller_cases())
def test_roller_radius_matches_spec(key, sim, tmp_path):
    spec_file, variant, model = gripper_cases()[key]
    raw = raw_variant(spec_file, variant)["finger"]
    radius = raw["roller"]["radius_mm"] * 1e-3
    assert model.roller_radius == pytest.approx(radius, rel=1e-12)
    path = materialise(model.name, model.urdf, model.files, tmp_path)
    robot = yourdfpy.URDF.load(str(path), build_scene_graph=False, load_meshes=False).robot
    body = load_pb(sim, path)
    links = pb_links(sim, body)
    for i in range(raw["count"]):
        (link,) = [lk for lk in robot.links if lk.name == f"finger{i}_roller"]
        (col,) = link.collisions
        assert col.geometry.cylinder.radius == pytest.approx(radius, rel=WRITTEN)
        assert col.geometry.cylinder.length == pytest.approx(raw["roller"]["width_mm"] * 1e-3, rel=WRITTEN)
        (shape,) = p.getCollisionShapeData(body, links[f"finger{i}_roller"], physicsClientId=sim)
        assert shape[2] == p.GEOM_CYLINDER
        assert shape[3][1] == pytest.approx(radius, rel=WRITTEN)  # pybullet: (length, radius, 0)


def test_every_sweep_value_gives_a_variant():
    for fname in GRIPPER_FILES:
        raw = tomllib.loads((GRIPPER_DIR / fname).read_text())
        variants = [v for f, v, _ in gripper_cases().values() if f.name == fname]
        sweep = raw.get("sweep", {})
        assert len(variants) == math.prod(len(v) for v in sweep.values())
        for key, values in sweep.items():
            assert sorted(dict(v.sweep)[key] for v in variants) == sorted(values)


# --- jaw -----------------------------------------------------------------------------------------

def test_jaw_joints_match_spec(sim, tmp_path):
    (key,) = [k for k, (_, _, m) in gripper_cases().items() if m.family == "jaw"]
    spec_file, variant, model = gripper_cases()[key]
    jaw = raw_variant(spec_file, variant)["jaw"]
    stroke = jaw["stroke_mm"] * 1e-3
    path = materialise(model.name, model.urdf, model.files, tmp_path)
    parsed = yourdfpy.URDF.load(str(path), build_scene_graph=False, load_meshes=False).robot.joints
    prismatic = sorted(j.name for j in parsed if j.type == "prismatic")
    assert prismatic == ["jaw0_slide", "jaw1_slide"]
    assert [j.name for j in parsed if j.type not in ("prismatic", "fixed")] == []
    body = load_pb(sim, path)
    info = pb_joints(sim, body)
    for j in parsed:
        if j.type != "prismatic":
            continue
        assert (j.limit.lower, j.limit.upper) == pytest.approx((0.0, stroke), rel=WRITTEN)
        assert (j.limit.effort, j.limit.velocity) == pytest.approx((jaw["force_n"], jaw["speed_mm_s"] * 1e-3),
                                                                   rel=WRITTEN)
        assert info[j.name][8:12] == pytest.approx((0.0, stroke, jaw["force_n"], jaw["speed_mm_s"] * 1e-3),
                                                   rel=WRITTEN)
    assert model.close_joints == ("jaw0_slide", "jaw1_slide")


def test_jaw_opening_and_closing(sim, tmp_path):
    """At slide 0 the pads' inner faces are `opening` apart; a positive slide closes both jaws."""
    (key,) = [k for k, (_, _, m) in gripper_cases().items() if m.family == "jaw"]
    spec_file, variant, model = gripper_cases()[key]
    raw = raw_variant(spec_file, variant)
    opening, stroke, pad_t = (raw["jaw"]["opening_mm"] * 1e-3, raw["jaw"]["stroke_mm"] * 1e-3,
                              raw["pad"]["thickness_mm"] * 1e-3)
    body = load_model(sim, model, tmp_path)
    links, joints = pb_links(sim, body), pb_joints(sim, body)

    def pad_gap(slide):
        for name in ("jaw0_slide", "jaw1_slide"):
            p.resetJointState(body, joints[name][0], slide, physicsClientId=sim)
        x = [p.getLinkState(body, links[f"jaw{i}_pad"], computeForwardKinematics=True,
                            physicsClientId=sim)[4][0] for i in (0, 1)]
        return abs(x[0] - x[1]) - pad_t

    # pybullet reports link poses in single precision: compare to a micrometre
    assert pad_gap(0.0) == pytest.approx(opening, abs=PB_POSITION)
    assert pad_gap(stroke) == pytest.approx(opening - 2 * stroke, abs=PB_POSITION)


# --- roller-finger geometry ----------------------------------------------------------------------

def roller_centres(cid, body, links, count):
    base = np.array(p.getBasePositionAndOrientation(body, physicsClientId=cid)[0])
    pts = [np.array(p.getLinkState(body, links[f"finger{i}_roller"], computeForwardKinematics=True,
                                   physicsClientId=cid)[4]) for i in range(count)]
    return [pt - base for pt in pts]


def test_scissor_roller_pairs_face_each_other_on_planes_crossed_at_50_degrees(sim, tmp_path):
    key = sorted(k for k in roller_cases() if k.startswith("scissor-roller"))[0]
    _, _, model = gripper_cases()[key]
    body = load_model(sim, model, tmp_path)
    centres = roller_centres(sim, body, pb_links(sim, body), 4)
    angles = [math.degrees(math.atan2(c[1], c[0])) % 360 for c in centres]
    np.testing.assert_allclose(angles, [0, 50, 180, 230], atol=1e-4)
    radii = [math.hypot(c[0], c[1]) for c in centres]
    assert radii == pytest.approx([radii[0]] * 4, abs=PB_POSITION)
    assert [c[2] for c in centres] == pytest.approx([centres[0][2]] * 4, abs=PB_POSITION)  # one height
    # each pair is opposed: its two rollers on one line through the hand axis
    for i, j in ((0, 2), (1, 3)):
        np.testing.assert_allclose(centres[i][:2] + centres[j][:2], [0, 0], atol=PB_POSITION)


@pytest.mark.parametrize("key", roller_cases())
def test_rollers_sit_where_the_spec_puts_them(key, sim, tmp_path):
    """All joints at 0: roller i at the placement angle and radius, one finger length plus one
    roller radius above the palm face (z = 0 of the palm link)."""
    spec_file, variant, model = gripper_cases()[key]
    f = raw_variant(spec_file, variant)["finger"]
    n = f["count"]
    angles = f.get("angles_deg", [360.0 * i / n for i in range(n)])
    body = load_model(sim, model, tmp_path)
    palm_com = np.array(p.getDynamicsInfo(body, -1, physicsClientId=sim)[3])
    for i, c in enumerate(roller_centres(sim, body, pb_links(sim, body), n)):
        c = c + palm_com  # base position is the palm's COM; move to the palm link frame
        a = math.radians(angles[i])
        want = np.array([math.cos(a), math.sin(a), 0.0]) * f["placement_radius_mm"] * 1e-3
        want[2] = (f["length_mm"] + f["roller"]["radius_mm"]) * 1e-3
        np.testing.assert_allclose(c, want, atol=PB_POSITION, err_msg=f"finger{i}")
    # a finger's friction pad sits on the finger's inner face (nearer the hand axis than the finger)
    links = pb_links(sim, body)
    for i in range(n):
        if f"finger{i}_pad" not in links:
            continue
        pad, finger = (p.getLinkState(body, links[name], computeForwardKinematics=True, physicsClientId=sim)[4]
                       for name in (f"finger{i}_pad", f"finger{i}_link"))
        gap = math.hypot(finger[0], finger[1]) - math.hypot(pad[0], pad[1])
        assert gap == pytest.approx((f["thickness_mm"] + f["pad"]["thickness_mm"]) / 2 * 1e-3, abs=PB_POSITION)


def inner_surface_velocity(cid, body, links, i, radius):
    """World velocity of the roller point nearest the hand axis, from pybullet's link velocities."""
    st = p.getLinkState(body, links[f"finger{i}_roller"], computeLinkVelocity=True, computeForwardKinematics=True,
                        physicsClientId=cid)
    centre, v, w = (np.array(x) for x in (st[4], st[6], st[7]))
    inward = -np.array([centre[0], centre[1], 0.0])
    inward /= np.linalg.norm(inward)
    return centre, v + np.cross(w, radius * inward)


@pytest.mark.parametrize("key", roller_cases())
def test_roll_and_pivot_directions(key, sim, tmp_path):
    """As the roller-finger family documents: a positive roll speed draws the object in (inner
    surface moves towards the palm, -z); at pivot +90 deg the same speed moves the inner surface
    sideways (tangentially), every finger in the same sense about the hand axis."""
    spec_file, variant, model = gripper_cases()[key]
    f = raw_variant(spec_file, variant)["finger"]
    n, r = f["count"], f["roller"]["radius_mm"] * 1e-3
    body = load_model(sim, model, tmp_path)
    links, joints = pb_links(sim, body), pb_joints(sim, body)
    omega = 2.0
    tol = 1e-6 * omega * r
    spins = []
    for pivot in (0.0, math.pi / 2):
        for i in range(n):
            p.resetJointState(body, joints[f"finger{i}_pivot"][0], pivot, physicsClientId=sim)
            p.resetJointState(body, joints[f"finger{i}_roll"][0], 0.0, targetVelocity=omega, physicsClientId=sim)
        for i in range(n):
            centre, v = inner_surface_velocity(sim, body, links, i, r)
            if pivot == 0.0:
                np.testing.assert_allclose(v, [0, 0, -omega * r], atol=tol, err_msg=f"finger{i} draw-in")
            else:
                radial = centre[:2] / np.linalg.norm(centre[:2])
                assert abs(v[2]) < tol and abs(v[:2] @ radial) < tol, (i, v)
                assert np.linalg.norm(v) == pytest.approx(omega * r, rel=1e-6)
                spins.append(np.sign(np.cross(centre, v)[2]))
    assert len(set(spins)) == 1, f"fingers would turn the object in opposite senses: {spins}"


@pytest.mark.parametrize("key", roller_cases())
def test_pivot_keeps_roller_centre(key, sim, tmp_path):
    spec_file, variant, model = gripper_cases()[key]
    n = raw_variant(spec_file, variant)["finger"]["count"]
    body = load_model(sim, model, tmp_path)
    links, joints = pb_links(sim, body), pb_joints(sim, body)
    before = roller_centres(sim, body, links, n)
    for i in range(n):
        p.resetJointState(body, joints[f"finger{i}_pivot"][0], 1.0, physicsClientId=sim)
    after = roller_centres(sim, body, links, n)
    np.testing.assert_allclose(np.array(after), np.array(before), atol=PB_POSITION)


@pytest.mark.parametrize("key", roller_cases())
def test_positive_flex_closes(key, sim, tmp_path):
    spec_file, variant, model = gripper_cases()[key]
    count = raw_variant(spec_file, variant)["finger"]["count"]
    body = load_model(sim, model, tmp_path)
    links, joints = pb_links(sim, body), pb_joints(sim, body)
    open_r = [math.hypot(c[0], c[1]) for c in roller_centres(sim, body, links, count)]
    for i in range(count):
        p.resetJointState(body, joints[f"finger{i}_flex"][0], 0.3, physicsClientId=sim)
    closed = roller_centres(sim, body, links, count)
    closed_r = [math.hypot(c[0], c[1]) for c in closed]
    assert all(c < o - 1e-3 for c, o in zip(closed_r, open_r)), (open_r, closed_r)
    # and the same yourdfpy forward kinematics agrees with pybullet's
    parsed = yourdfpy.URDF.load(str(materialise(model.name, model.urdf, model.files, tmp_path)),
                                build_scene_graph=True, load_meshes=False)
    parsed.update_cfg({f"finger{i}_flex": 0.3 for i in range(count)})
    palm_com = np.array(p.getDynamicsInfo(body, -1, physicsClientId=sim)[3])
    for i in range(count):
        fk = parsed.get_transform(f"finger{i}_roller", "palm")[:3, 3]
        np.testing.assert_allclose(fk - palm_com, closed[i], atol=PB_POSITION)


# --- determinism ---------------------------------------------------------------------------------

def digest(instances):
    h = hashlib.sha256()
    for inst in instances:
        h.update(inst.name.encode() + b"\0" + inst.urdf.encode())
        for name in sorted(inst.files):
            h.update(name.encode() + b"\0" + inst.files[name])
    return h.hexdigest()


@pytest.mark.parametrize("fname", OBJECT_SET_FILES)
def test_same_set_twice_is_byte_identical(fname):
    first = generate(load_any(OBJECT_DIR / fname))
    second = generate(load_any(OBJECT_DIR / fname))
    assert [i.name for i in first] == [i.name for i in second]
    for a, b in zip(first, second):
        assert a.urdf == b.urdf, a.name
        assert a.files == b.files, a.name


def copy_set(fname, folder, seed=None):
    """A copy of a demo set (with its mesh folder) in another folder, optionally with another seed."""
    folder.mkdir(parents=True, exist_ok=True)
    text = (OBJECT_DIR / fname).read_text()
    if seed is not None:
        raw = tomllib.loads(text)
        text = text.replace(f"seed = {raw['seed']}\n", f"seed = {seed}\n", 1)
        assert tomllib.loads(text)["seed"] == seed
    (folder / fname).write_text(text)
    shutil.copytree(OBJECT_DIR / "meshes", folder / "meshes")
    return folder / fname


@pytest.mark.parametrize("fname", OBJECT_SET_FILES)
def test_copy_elsewhere_same_seed_is_byte_identical(fname, tmp_path):
    """Moving the set file changes nothing (also re-runs the mesh decomposition, cached per path)."""
    here = generate(load_any(OBJECT_DIR / fname))
    there = generate(load_any(copy_set(fname, tmp_path / "copy")))
    assert [(i.name, i.urdf, i.files) for i in here] == [(i.name, i.urdf, i.files) for i in there]


def test_generation_is_identical_in_another_process():
    """Streams come from stable hashes, so a fresh interpreter (other hash salt) gives the same bytes."""
    code = textwrap.dedent(f"""
        import hashlib
        from pathlib import Path
        from harness.models.objects import generate
        from harness.models.specs import load_any
        digests = []
        for f in {list(OBJECT_SET_FILES)!r}:
            h = hashlib.sha256()
            for inst in generate(load_any(Path({str(OBJECT_DIR)!r}) / f)):
                h.update(inst.name.encode() + b"\\0" + inst.urdf.encode())
                for name in sorted(inst.files):
                    h.update(name.encode() + b"\\0" + inst.files[name])
            digests.append(h.hexdigest())
        print(",".join(digests))
    """)
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True)
    here = ",".join(digest(generate(load_any(OBJECT_DIR / f))) for f in OBJECT_SET_FILES)
    assert out.stdout.strip().splitlines()[-1] == here


@pytest.mark.parametrize("fname", OBJECT_SET_FILES)
def test_other_seed_gives_other_objects(fname, tmp_path):
    here = generate(load_any(OBJECT_DIR / fname))
    seed = tomllib.loads((OBJECT_DIR / fname).read_text())["seed"] + 1
    there = generate(load_any(copy_set(fname, tmp_path / "reseeded", seed=seed)))
    assert [i.name for i in here] == [i.name for i in there]
    differ = [a.name for a, b in zip(here, there) if (a.urdf, a.files) != (b.urdf, b.files)]
    assert differ, "a different seed gave the very same objects"
    # only entries with a range can change; fixed ones stay put
    for a, b in zip(here, there):
        assert set(a.draws) == set(b.draws)


def test_gripper_generation_is_deterministic():
    for fname in GRIPPER_FILES:
        spec = load_any(GRIPPER_DIR / fname)
        first, second = build_models(spec), build_models(load_any(GRIPPER_DIR / fname))
        assert [(m.urdf, m.key, m.files) for m in first] == [(m.urdf, m.key, m.files) for m in second]
        assert len({m.key for m in first}) == len(first)  # each variant has its own key
        assert len({m.urdf for m in first}) == len(first)


def folder_bytes(folder):
    return {str(f.relative_to(folder)): f.read_bytes() for f in sorted(folder.rglob("*")) if f.is_file()}


def test_materialise_twice_gives_the_same_folder(tmp_path):
    inst = object_cases()["stress:beaker"][2]
    _, _, model = gripper_cases()[sorted(roller_cases())[0]]
    for name, urdf, files in ((inst.name, inst.urdf, inst.files), (model.name, model.urdf, model.files)):
        first = materialise(name, urdf, files, tmp_path / "a")
        second = materialise(name, urdf, files, tmp_path / "a")
        assert first == second
        other = materialise(name, urdf, files, tmp_path / "b")
        assert other.parent.name == first.parent.name
        assert folder_bytes(other.parent) == folder_bytes(first.parent)
        assert set(folder_bytes(first.parent)) == {"model.urdf", *files}
    # nothing half-written is left behind
    assert sorted(f.name for f in (tmp_path / "a").iterdir() if f.name.startswith(".")) == []
    assert len(list((tmp_path / "a").iterdir())) == 2


# --- material and mass ranges --------------------------------------------------------------------

def span(raw, key, default, scale=1.0):
    value = raw.get(key, default)
    lo, hi = (value, value) if not isinstance(value, list) else value
    return lo * scale, hi * scale


@pytest.mark.parametrize("fname", OBJECT_SET_FILES)
def test_materials_and_masses_within_spec_ranges(fname):
    raw = tomllib.loads((OBJECT_DIR / fname).read_text())
    by_entry = {}
    for set_file, entry, inst in object_cases().values():
        if set_file.name == fname:
            by_entry.setdefault(inst.entry, []).append(inst)
    assert [o["name"] for o in raw["object"]] == list(by_entry)
    for item in raw["object"]:
        insts = by_entry[item["name"]]
        assert len(insts) == item.get("count", 1), item["name"]
        # documented defaults of the object-set format when a key is absent: friction 0.8, restitution 0.1
        f_lo, f_hi = span(item, "friction", 0.8)
        r_lo, r_hi = span(item, "restitution", 0.1)
        for inst in insts:
            assert f_lo <= inst.friction <= f_hi, (inst.name, inst.friction)
            assert r_lo <= inst.restitution <= r_hi, (inst.name, inst.restitution)
            assert (inst.stiffness is None) == ("stiffness_n_m" not in item)
            if "stiffness_n_m" in item:
                s_lo, s_hi = span(item, "stiffness_n_m", None)
                d_lo, d_hi = span(item, "damping_n_s_m", None)
                assert s_lo <= inst.stiffness <= s_hi and d_lo <= inst.damping <= d_hi
            if "mass_g" in item:
                m_lo, m_hi = span(item, "mass_g", None, scale=1e-3)
                assert m_lo * (1 - 1e-12) <= inst.mass <= m_hi * (1 + 1e-12), (inst.name, inst.mass)
            else:
                d_lo, d_hi = span(item, "density_kg_m3", None)
                assert d_lo * (1 - 1e-9) <= inst.mass / inst.volume <= d_hi * (1 + 1e-9), inst.name
            # the URDF carries the same mass
            written = float(ET.fromstring(inst.urdf).find("link/inertial/mass").get("value"))
            assert written == pytest.approx(inst.mass, rel=WRITTEN)
        if isinstance(item.get("friction"), list) and len(insts) > 1:
            assert len({i.friction for i in insts}) == len(insts), "a friction range should give different draws"
