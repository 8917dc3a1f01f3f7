"""Reference checks of mass properties: harness.models.massprops against handbook formulas and trimesh,
and every object instance of the demo sets against trimesh's mass properties of the same geometry.

Every reference value names its source in a comment. trimesh is used as the independent
reference library: `Trimesh.mass_properties` integrates a closed triangle mesh exactly, and
`trimesh.primitives.Sphere` / `Cylinder` return analytic volume and moment_inertia at density 1.
"""

from __future__ import annotations

import functools
import io
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import trimesh
from scipy.spatial.transform import Rotation

from harness.models import massprops as M
from harness.models.objects import generate
from harness.models.specs import load_any

ROOT = Path(__file__).resolve().parents[1]
OBJECT_SET_FILES = (ROOT / "models" / "objects" / "lab-cell.toml", ROOT / "models" / "objects" / "stress.toml")
RACK_CLIP_OBJ = ROOT / "models" / "objects" / "meshes" / "rack-clip.obj"

EXACT = 1e-9  # relative: both sides are exact formulas / exact integrals in float64


def assert_tensor(got, want, rtol, what=""):
    """Element-wise relative check with an absolute floor scaled to the tensor's largest entry,
    so entries that are exactly zero on one side and round-off on the other do not fail."""
    got, want = np.asarray(got, dtype=float), np.asarray(want, dtype=float)
    np.testing.assert_allclose(got, want, rtol=rtol, atol=rtol * np.abs(want).max(), err_msg=what)


def assert_point(got, want, size, rtol, what=""):
    """A position compared to `rtol` of the body's size (a centre of mass near 0 has no scale of its own)."""
    np.testing.assert_allclose(np.asarray(got, dtype=float), np.asarray(want, dtype=float),
                               rtol=0, atol=rtol * size, err_msg=what)


# --- primitives: handbook formulas and trimesh's analytic primitives ----------------------------

PRIMITIVE_DIMS = [(0.02, 0.05, 0.03), (1.0, 2.0, 3.0), (0.0015, 0.05, 0.024), (0.3, 0.3, 0.3)]


@pytest.mark.parametrize("r", [0.002, 0.02, 1.0, 7.5])
def test_sphere_inertia(r):
    m = 0.3
    got = M.sphere_inertia(m, r)
    # handbook formula: solid sphere I = 2/5 m r^2 about any diameter (any mechanics handbook; recalled from memory)
    assert_tensor(got, np.eye(3) * 2.0 / 5.0 * m * r * r, EXACT)
    # reference library: trimesh.primitives.Sphere analytic volume and moment_inertia (density 1)
    ref = trimesh.primitives.Sphere(radius=r)
    assert ref.volume == pytest.approx(4.0 / 3.0 * math.pi * r ** 3, rel=EXACT)
    assert_tensor(got, ref.moment_inertia * m / ref.volume, EXACT)


@pytest.mark.parametrize("r, h", [(0.01, 0.05), (0.0275, 0.012), (1.0, 1.0), (0.015, 0.0012)])
def test_cylinder_inertia(r, h):
    m = 0.7
    got = M.cylinder_inertia(m, r, h)
    # handbook formula: solid cylinder, axis z: Izz = m r^2 / 2, Ixx = Iyy = m (3 r^2 + h^2) / 12
    # (any mechanics handbook; recalled from memory)
    assert_tensor(got, np.diag([m * (3 * r * r + h * h) / 12] * 2 + [m * r * r / 2]), EXACT)
    # reference library: trimesh.primitives.Cylinder analytic volume and moment_inertia (density 1)
    ref = trimesh.primitives.Cylinder(radius=r, height=h)
    assert ref.volume == pytest.approx(math.pi * r * r * h, rel=EXACT)
    assert_tensor(got, ref.moment_inertia * m / ref.volume, EXACT)


@pytest.mark.parametrize("dims", PRIMITIVE_DIMS)
def test_box_inertia(dims):
    m = 1.3
    x, y, z = dims
    got = M.box_inertia(m, x, y, z)
    # handbook formula: solid cuboid Ixx = m (y^2 + z^2) / 12 etc. (any mechanics handbook; recalled from memory)
    assert_tensor(got, np.diag([y * y + z * z, x * x + z * z, x * x + y * y]) * m / 12, EXACT)
    # reference library: trimesh.primitives.Box (analytic volume; its 12-triangle mesh integral is exact)
    ref = trimesh.primitives.Box(extents=dims)
    assert ref.volume == pytest.approx(x * y * z, rel=EXACT)
    assert_tensor(got, ref.moment_inertia * m / ref.volume, EXACT)


def capsule_handbook(r, h):
    """Unit-density capsule written the common handbook way: each hemisphere taken about its
    flat-face diameter (2/5 m r^2) and moved to the capsule centre, giving
    m_h (2 r^2 / 5 + h^2 / 4 + 3 h r / 8) (recalled from memory; a different route from
    harness.models.massprops, which uses the hemisphere's own centroid and 83/320)."""
    m_c = math.pi * r * r * h
    m_h = 2.0 / 3.0 * math.pi * r ** 3
    across = m_c * (h * h / 12 + r * r / 4) + 2 * m_h * (2 * r * r / 5 + h * h / 4 + 3 * h * r / 8)
    axial = m_c * r * r / 2 + 2 * (2.0 / 5.0) * m_h * r * r
    return m_c + 2 * m_h, np.diag([across, across, axial])


def fine_capsule_mesh(r, h):
    """trimesh.creation.capsule, built at a scale of about 1 and scaled down: at millimetre size
    trimesh's vertex merging collapses neighbouring rings of a fine capsule and breaks it."""
    unit = max(r, h)
    mesh = trimesh.creation.capsule(height=h / unit, radius=r / unit, count=[128, 256])
    mesh.apply_scale(unit)
    assert mesh.is_watertight
    return mesh


@pytest.mark.parametrize("r, h", [(0.006, 0.03), (0.0065, 0.045), (1.0, 0.5), (0.01, 0.0)])
def test_capsule(r, h):
    got = M.capsule(r, h)
    volume, inertia = capsule_handbook(r, h)
    assert got.volume == pytest.approx(volume, rel=EXACT)
    # reference library: trimesh.primitives.Capsule analytic volume pi r^2 (4/3 r + h)
    assert got.volume == pytest.approx(trimesh.primitives.Capsule(radius=r, height=h).volume, rel=EXACT)
    assert_tensor(got.com, np.zeros(3), EXACT)
    assert_tensor(got.inertia, inertia, EXACT)
    # reference library: trimesh mass_properties of a fine faceted capsule (faceting costs ~1e-4)
    mesh = fine_capsule_mesh(r, h)
    assert got.volume == pytest.approx(mesh.volume, rel=1e-3)
    assert_point(got.com, mesh.center_mass, r + h, 1e-6)
    assert_tensor(got.inertia, mesh.moment_inertia, 1e-3)


def test_capsule_of_zero_length_is_a_sphere():
    # handbook formula: solid sphere I = 2/5 m r^2 (recalled from memory)
    r = 0.02
    got = M.capsule(r, 0.0)
    assert got.volume == pytest.approx(4.0 / 3.0 * math.pi * r ** 3, rel=EXACT)
    assert_tensor(got.inertia, M.sphere_inertia(got.volume, r), EXACT)


# --- closed triangle meshes ---------------------------------------------------------------------

def check_polyhedron_vs_trimesh(mesh, what=""):
    """harness.models.massprops.polyhedron against trimesh's exact mesh integral (density 1)."""
    assert mesh.is_watertight and mesh.is_winding_consistent and mesh.volume > 0
    got = M.polyhedron(mesh.vertices, mesh.faces)
    size = float(np.ptp(mesh.vertices, axis=0).max())
    # reference library: trimesh.Trimesh.mass_properties (volume, center_mass, moment_inertia about the COM)
    assert got.volume == pytest.approx(mesh.volume, rel=EXACT), what
    assert_point(got.com, mesh.center_mass, size, EXACT, what)
    assert_tensor(got.inertia, mesh.moment_inertia, EXACT, what)
    return got


@pytest.mark.parametrize("seed", range(6))
def test_polyhedron_random_convex_hulls(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(8, 200))
    scale = 10.0 ** rng.uniform(-3, 0)  # millimetres to a metre
    points = rng.normal(size=(n, 3)) * rng.uniform(0.2, 1.0, size=3) * scale + rng.normal(size=3) * scale
    hull = trimesh.convex.convex_hull(points)
    check_polyhedron_vs_trimesh(hull, f"seed {seed}")


def test_polyhedron_unit_cube_matches_handbook():
    # handbook formula: solid cube of side 1 about its centre, I = m / 6 (recalled from memory)
    cube = trimesh.creation.box(extents=(1, 1, 1))
    got = M.polyhedron(cube.vertices + 0.5, cube.faces)  # corner at the origin: com (0.5, 0.5, 0.5)
    assert got.volume == pytest.approx(1.0, rel=EXACT)
    assert_tensor(got.com, [0.5, 0.5, 0.5], EXACT)
    assert_tensor(got.inertia, np.eye(3) / 6.0, EXACT)


NON_CONVEX = {
    # reference library: trimesh.creation builds closed, outward-wound concave solids
    "annulus": lambda: trimesh.creation.annulus(r_min=0.01, r_max=0.02, height=0.012, sections=40),
    "torus": lambda: trimesh.creation.torus(major_radius=0.05, minor_radius=0.012, major_sections=40,
                                            minor_sections=20),
    "rack-clip": lambda: trimesh.load(RACK_CLIP_OBJ, force="mesh", process=False),
    "two-box-union": lambda: trimesh.util.concatenate([
        trimesh.creation.box(extents=(0.04, 0.01, 0.01)),
        trimesh.creation.box(extents=(0.01, 0.01, 0.05), transform=trimesh.transformations.translation_matrix(
            (0.015, 0.0, 0.03)))]),
}


@pytest.mark.parametrize("name", sorted(NON_CONVEX))
def test_polyhedron_non_convex_closed_mesh(name):
    mesh = NON_CONVEX[name]()
    assert not mesh.is_convex
    check_polyhedron_vs_trimesh(mesh, name)


@pytest.mark.parametrize("name", ["rack-clip", "torus", "hull"])
def test_polyhedron_off_origin_rotated(name):
    """Moving and turning a mesh moves its COM and turns its inertia (I' = R I R^T), nothing else."""
    rng = np.random.default_rng(11)
    base = (NON_CONVEX[name]() if name != "hull"
            else trimesh.convex.convex_hull(rng.normal(size=(40, 3)) * [0.03, 0.01, 0.02] + [0.05, 0.0, 0.0]))
    rot = Rotation.from_euler("zyx", [37.0, -21.0, 113.0], degrees=True).as_matrix()
    offset = np.array([0.4, -0.25, 0.7])
    moved = base.copy()
    moved.apply_transform(np.block([[rot, offset[:, None]], [np.zeros((1, 3)), np.ones((1, 1))]]))
    before = check_polyhedron_vs_trimesh(base, name)
    after = check_polyhedron_vs_trimesh(moved, name + " moved")
    size = float(np.ptp(base.vertices, axis=0).max())
    # parallel-axis / rotation rule for rigid bodies (any mechanics handbook; recalled from memory)
    assert after.volume == pytest.approx(before.volume, rel=EXACT)
    assert_point(after.com, rot @ before.com + offset, size, EXACT)
    assert_tensor(after.inertia, rot @ before.inertia @ rot.T, EXACT)


def test_polyhedron_reversed_winding_gives_negative_volume():
    """Faces wound inward flip the sign of the volume (the signed-tetrahedron sum; common practice)."""
    box = trimesh.creation.box(extents=(0.1, 0.2, 0.3))
    assert M.polyhedron(box.vertices, box.faces[:, ::-1]).volume == pytest.approx(-0.006, rel=EXACT)


# --- unions of parts ----------------------------------------------------------------------------

def _transform(rot, offset):
    return np.block([[rot, np.asarray(offset, dtype=float)[:, None]], [np.zeros((1, 3)), np.ones((1, 1))]])


def assert_combines_like(parts, meshes):
    """combine(parts) has the volume, COM and inertia trimesh gives the union of the meshes."""
    got = M.combine(parts)
    union = trimesh.util.concatenate(meshes)
    assert got.volume == pytest.approx(union.volume, rel=EXACT)
    assert_point(got.com, union.center_mass, 1.0, EXACT)
    assert_tensor(got.inertia, union.moment_inertia, EXACT)


def test_combine_disjoint_boxes_vs_trimesh():
    rng = np.random.default_rng(5)
    parts, meshes = [], []
    for k in range(5):
        dims = rng.uniform(0.01, 0.05, size=3)
        rot = Rotation.from_rotvec(rng.normal(size=3)).as_matrix()
        offset = np.array([0.2 * k, 0.05 * (-1) ** k, 0.03 * k])  # 0.2 m apart: boxes under 0.09 m never touch
        volume = float(np.prod(dims))
        # handbook box about its centre (checked above) as the part's own mass properties
        parts.append((M.MassProps(volume, np.zeros(3), M.box_inertia(volume, *dims)), offset, rot))
        meshes.append(trimesh.creation.box(extents=dims, transform=_transform(rot, offset)))
    # reference library: trimesh.Trimesh.mass_properties of the concatenated (disjoint) boxes
    assert_combines_like(parts, meshes)


def test_combine_parts_with_their_own_com():
    """Parts whose centre of mass is off their frame's origin: combine turns the COM with the part."""
    rng = np.random.default_rng(9)
    parts, meshes = [], []
    for k in range(3):
        hull = trimesh.convex.convex_hull(rng.normal(size=(30, 3)) * 0.01 + [0.02, 0.01, -0.03])
        rot = Rotation.from_rotvec(rng.normal(size=3)).as_matrix()
        offset = np.array([0.3 * k, 0.0, -0.1 * k])
        parts.append((M.polyhedron(hull.vertices, hull.faces), offset, rot))
        meshes.append(hull.copy().apply_transform(_transform(rot, offset)))
    # reference library: trimesh.Trimesh.mass_properties of the concatenated (disjoint) hulls
    assert_combines_like(parts, meshes)


def test_combine_of_one_part_is_that_part():
    box = trimesh.creation.box(extents=(0.03, 0.02, 0.01))
    one = M.polyhedron(box.vertices, box.faces)
    got = M.combine([(one, np.zeros(3), np.eye(3))])
    assert got.volume == pytest.approx(one.volume, rel=EXACT)
    assert_tensor(got.inertia, one.inertia, EXACT)


# --- every object instance of the demo sets -----------------------------------------------------

@functools.lru_cache(maxsize=None)
def demo_instances():
    """{"set:instance": (entry spec, instance)} for both demo object sets."""
    out = {}
    for path in OBJECT_SET_FILES:
        object_set = load_any(path)
        entries = {e.name: e for e in object_set.entries}
        for inst in generate(object_set):
            out[f"{object_set.name}:{inst.name}"] = (entries[inst.entry], inst)
    return out


def urdf_body(text):
    """(mass, com (3,), inertia (3, 3), [(shape, dims, xyz)]) of the single link of an object URDF,
    read straight from the XML so the check covers what is written."""
    link = ET.fromstring(text).find("link")
    el = link.find("inertial")
    mass = float(el.find("mass").get("value"))
    com = np.array([float(x) for x in el.find("origin").get("xyz").split()])
    rpy = [float(x) for x in el.find("origin").get("rpy", "0 0 0").split()]
    assert rpy == [0.0, 0.0, 0.0]
    g = {k: float(el.find("inertia").get(k)) for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
    inertia = np.array([[g["ixx"], g["ixy"], g["ixz"]], [g["ixy"], g["iyy"], g["iyz"]], [g["ixz"], g["iyz"], g["izz"]]])
    shapes = []
    for col in link.findall("collision"):
        geom = col.find("geometry")[0]
        xyz = np.array([float(x) for x in col.find("origin").get("xyz").split()])
        if geom.tag == "sphere":
            dims = (float(geom.get("radius")),)
        elif geom.tag == "cylinder":
            dims = (float(geom.get("radius")), float(geom.get("length")))
        elif geom.tag == "box":
            dims = tuple(float(x) for x in geom.get("size").split())
        else:
            dims = (geom.get("filename"),)
        shapes.append((geom.tag, dims, xyz))
    return mass, com, inertia, shapes


def parts_mesh(inst):
    """All convex parts of an instance, from its OBJ files, as one trimesh."""
    meshes = [trimesh.load(io.BytesIO(data), file_type="obj", process=False, force="mesh")
              for _, data in sorted(inst.files.items())]
    for m in meshes:
        assert m.is_watertight and m.is_winding_consistent and m.volume > 0
    return trimesh.util.concatenate(meshes)


def check_written_matches_fields(inst):
    mass, com, inertia, _ = urdf_body(inst.urdf)
    assert mass == pytest.approx(inst.mass, rel=EXACT)
    assert_point(com, inst.com, max(inst.extents), EXACT)
    assert_tensor(inertia, inst.inertia, EXACT)
    return mass, com, inertia


def check_density(entry, inst, volume, rtol):
    """A fixed density gives mass = density x volume; a density range holds mass / volume."""
    if entry.density is not None:
        lo, hi = entry.density.lo, entry.density.hi
        assert lo * (1 - rtol) <= inst.mass / volume <= hi * (1 + rtol), (inst.name, inst.mass / volume, lo, hi)


def check_analytic(entry, inst, ref, what):
    """An instance whose single collision shape is a primitive against trimesh's analytic primitive."""
    mass, com, inertia = check_written_matches_fields(inst)
    # reference library: trimesh.primitives analytic volume / moment_inertia at density 1
    assert inst.volume == pytest.approx(ref.volume, rel=EXACT), what
    check_density(entry, inst, ref.volume, EXACT)
    assert_point(com, ref.center_mass, max(inst.extents), EXACT, what)
    assert_tensor(inertia, ref.moment_inertia * mass / ref.volume, EXACT, what)


def check_sphere(entry, inst):
    (shape, (r,), xyz), = urdf_body(inst.urdf)[3]
    assert shape == "sphere" and r == pytest.approx(inst.draws["radius"], rel=EXACT)
    check_analytic(entry, inst, trimesh.primitives.Sphere(radius=r), inst.name)


def check_cylinder(entry, inst):
    (shape, (r, length), xyz), = urdf_body(inst.urdf)[3]
    assert shape == "cylinder" and r == pytest.approx(inst.draws["radius"], rel=EXACT)
    assert length == pytest.approx(inst.draws.get("height", inst.draws.get("thickness")), rel=EXACT)
    check_analytic(entry, inst, trimesh.primitives.Cylinder(radius=r, height=length), inst.name)


def check_box(entry, inst):
    (shape, dims, xyz), = urdf_body(inst.urdf)[3]
    d = inst.draws
    assert shape == "box"
    assert dims == pytest.approx((d["size_x"], d["size_y"], d.get("size_z", d.get("thickness"))), rel=EXACT)
    check_analytic(entry, inst, trimesh.primitives.Box(extents=dims), inst.name)


def check_capsule(entry, inst):
    mass, com, inertia = check_written_matches_fields(inst)
    shapes = urdf_body(inst.urdf)[3]
    (cyl, (r, h), _), = [s for s in shapes if s[0] == "cylinder"]
    caps = sorted((s for s in shapes if s[0] == "sphere"), key=lambda s: s[2][2])
    assert [c[1][0] for c in caps] == pytest.approx([r, r], rel=EXACT)
    assert [c[2][2] for c in caps] == pytest.approx([-h / 2, h / 2], rel=EXACT)
    assert (r, h) == pytest.approx((inst.draws["radius"], inst.draws["length"]), rel=EXACT)
    # reference library: trimesh.primitives.Capsule analytic volume
    assert inst.volume == pytest.approx(trimesh.primitives.Capsule(radius=r, height=h).volume, rel=EXACT)
    check_density(entry, inst, inst.volume, EXACT)
    # handbook capsule (see capsule_handbook; recalled from memory), exact
    volume, unit_inertia = capsule_handbook(r, h)
    assert_tensor(inertia, unit_inertia * mass / volume, EXACT)
    # reference library: trimesh mass_properties of a fine faceted capsule (faceting costs ~1e-4)
    mesh = fine_capsule_mesh(r, h)
    assert_point(com, mesh.center_mass, 2 * r + h, 1e-6)
    assert_tensor(inertia, mesh.moment_inertia * mass / mesh.volume, 1e-3)


# The OBJ files print coordinates to 10 significant digits, so the volume of the written parts
# differs from the one integrated before printing by ~1e-10 per coordinate, amplified by a thin
# wall (the beaker's 2 mm wall on a 22 mm radius reaches 1.04e-9). Volume and mass get 3e-9.
WRITTEN_VOLUME = 3e-9


def check_mesh_parts(entry, inst):
    """A union of convex mesh parts: the parts' own OBJ files are the geometry."""
    mass, com, inertia = check_written_matches_fields(inst)
    shapes = urdf_body(inst.urdf)[3]
    assert [s[1][0] for s in shapes] == sorted(inst.files, key=lambda n: int(n.rsplit("part", 1)[1][:-4]))
    mesh = parts_mesh(inst)
    # reference library: trimesh.Trimesh.mass_properties of the concatenated parts, density = mass / volume
    mesh.density = mass / mesh.volume
    assert inst.volume == pytest.approx(mesh.volume, rel=WRITTEN_VOLUME)
    check_density(entry, inst, mesh.volume, WRITTEN_VOLUME)
    assert_point(com, mesh.center_mass, max(inst.extents), EXACT)
    assert_tensor(inertia, mesh.moment_inertia, EXACT)
    return mass, inertia


def check_ellipsoid(entry, inst):
    mass, inertia = check_mesh_parts(entry, inst)
    a, b, c = inst.draws["a"], inst.draws["b"], inst.draws["c"]
    # handbook formula: solid ellipsoid I_x = m (b^2 + c^2) / 5 etc. (recalled from memory);
    # the kind is a faceted hull of a level-3 icosphere, so ~1 %
    assert_tensor(inertia, np.diag([b * b + c * c, a * a + c * c, a * a + b * b]) * mass / 5, 1e-2)
    # handbook formula: ellipsoid volume 4/3 pi a b c (recalled from memory); faceting loses ~0.9 %
    assert inst.volume == pytest.approx(4.0 / 3.0 * math.pi * a * b * c, rel=1e-2)


def check_ring(entry, inst):
    mass, inertia = check_mesh_parts(entry, inst)
    ro, ri, h = inst.draws["outer_radius"], inst.draws["inner_radius"], inst.draws["height"]
    # handbook formula: hollow cylinder (annulus) Izz = m (R^2 + r^2) / 2,
    # Ixx = Iyy = m (3 (R^2 + r^2) + h^2) / 12 (recalled from memory); the kind has a 48-gon outside
    # and a 16-chord bore, ~2 % away from the ideal annulus
    side = mass * (3 * (ro * ro + ri * ri) + h * h) / 12
    assert_tensor(inertia, np.diag([side, side, mass * (ro * ro + ri * ri) / 2]), 3e-2)
    assert inst.volume == pytest.approx(math.pi * (ro * ro - ri * ri) * h, rel=3e-2)


def check_file_mesh(entry, inst):
    """The mesh kind: mass properties are the user's closed mesh's own, not its convex parts'."""
    mass, com, inertia = check_written_matches_fields(inst)
    s = inst.draws["scale"]
    original = trimesh.load(ROOT / "models" / "objects" / entry.file, force="mesh", process=False)
    original.apply_scale(s)
    assert original.is_watertight
    # reference library: trimesh.Trimesh.mass_properties of the original OBJ, density = mass / volume
    original.density = mass / original.volume
    assert inst.volume == pytest.approx(original.volume, rel=1e-6)
    check_density(entry, inst, original.volume, 1e-6)
    assert_tensor(inertia, original.moment_inertia, 1e-6)
    # the body frame sits at the mesh's COM: the collision parts, moved back by the original COM,
    # cover the original's bounding box (a convex decomposition follows the surface closely)
    size = float(np.ptp(original.vertices, axis=0).max())
    assert_point(com, np.zeros(3), size, 1e-9)
    parts = parts_mesh(inst)
    np.testing.assert_allclose(parts.bounds + original.center_mass, original.bounds, atol=1e-3 * size)
    # convex parts approximate the solid: volume within 2 % (common practice for a decomposition)
    assert parts.volume == pytest.approx(original.volume, rel=2e-2)


CHECKS = {
    "sphere": check_sphere,
    "cylinder": check_cylinder,
    "disc": check_cylinder,
    "box": check_box,
    "plate": check_box,
    "capsule": check_capsule,
    "ellipsoid": check_ellipsoid,
    "ring": check_ring,
    "cup": check_mesh_parts,
    "superquadric": check_mesh_parts,
    "polytope": check_mesh_parts,
    "mesh": check_file_mesh,
}


def test_every_demo_kind_has_a_reference_check():
    kinds = {inst.kind for _, inst in demo_instances().values()}
    assert kinds <= set(CHECKS), f"kinds without a mass-property check: {sorted(kinds - set(CHECKS))}"
    # the demo sets are meant to exercise every kind the checks know
    assert kinds == set(CHECKS)


@pytest.mark.parametrize("key", sorted(demo_instances()))
def test_demo_instance_mass_properties(key):
    entry, inst = demo_instances()[key]
    CHECKS[inst.kind](entry, inst)


# --- gripper links: the written inertia is that of the link's own collision solid ---------------

GRIPPER_SPEC_FILES = sorted((ROOT / "models" / "grippers").glob("*.toml"))


def _origin(el):
    xyz = [float(x) for x in el.get("xyz", "0 0 0").split()]
    rpy = [float(x) for x in el.get("rpy", "0 0 0").split()]
    # URDF rpy: fixed-axis roll about x, then pitch about y, then yaw about z (URDF specification)
    return trimesh.transformations.compose_matrix(angles=rpy, translate=xyz)


@pytest.mark.parametrize("spec_file", GRIPPER_SPEC_FILES, ids=lambda f: f.stem)
def test_gripper_link_inertia_is_its_collision_solid(spec_file):
    """Each link with one primitive collision shape is modelled as a uniform solid of that shape:
    COM at the shape's centre and inertia = the primitive's, turned with the shape's rpy (this
    catches a roller whose inertia axis does not follow its turned cylinder)."""
    from harness.models.grippers import build_models
    checked = 0
    for model in build_models(load_any(spec_file)):
        for link in ET.fromstring(model.urdf).findall("link"):
            cols = link.findall("collision")
            if len(cols) != 1:
                continue
            geom = cols[0].find("geometry")[0]
            t = _origin(cols[0].find("origin"))
            # reference library: trimesh.primitives analytic (Sphere, Cylinder) or exact-mesh (Box) mass properties
            if geom.tag == "cylinder":
                ref = trimesh.primitives.Cylinder(radius=float(geom.get("radius")), height=float(geom.get("length")),
                                                  transform=t)
            elif geom.tag == "box":
                ref = trimesh.primitives.Box(extents=[float(x) for x in geom.get("size").split()], transform=t)
            else:
                ref = trimesh.primitives.Sphere(radius=float(geom.get("radius")), center=t[:3, 3])
            el = link.find("inertial")
            mass = float(el.find("mass").get("value"))
            com = [float(x) for x in el.find("origin").get("xyz").split()]
            g = {k: float(el.find("inertia").get(k)) for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
            inertia = [[g["ixx"], g["ixy"], g["ixz"]], [g["ixy"], g["iyy"], g["iyz"]], [g["ixz"], g["iyz"], g["izz"]]]
            what = f"{model.name} link {link.get('name')}"
            assert_point(com, ref.center_mass, float(np.ptp(ref.bounds, axis=0).max()), EXACT, what)
            assert_tensor(inertia, ref.moment_inertia * mass / ref.volume, EXACT, what)
            checked += 1
    assert checked > 0


# --- urdf-folder objects: mass properties come from the user's <inertial> -------------------------

WIDGET_URDF = """<?xml version="1.0"?>
<robot name="widget">
  <link name="body">
    <inertial><origin xyz="0.01 0 0.002" rpy="{rpy}"/><mass value="0.1"/>
      <inertia ixx="1e-5" ixy="0" ixz="0" iyy="4e-5" iyz="0" izz="4.5e-5"/></inertial>
    <collision><origin xyz="0 0 0" rpy="0 0 0"/><geometry><box size="0.04 0.02 0.01"/></geometry></collision>
  </link>
</robot>
"""
WIDGET_SET = """name = "folder-set"
seed = 3
[[object]]
name = "widgets"
kind = "urdf-folder"
folder = "objs"
"""


def urdf_folder_instance(folder, rpy):
    (folder / "objs").mkdir(parents=True)
    (folder / "objs" / "widget.urdf").write_text(WIDGET_URDF.format(rpy=" ".join(map(repr, rpy))))
    (folder / "set.toml").write_text(WIDGET_SET)
    (inst,) = generate(load_any(folder / "set.toml"))
    return inst


def test_urdf_folder_object_takes_the_files_inertial(tmp_path):
    inst = urdf_folder_instance(tmp_path, (0.0, 0.0, 0.0))
    # written back as one link of our own with the file's collision box and its <inertial>
    assert inst.urdf.count("<link ") == 1 and '<box size="0.04 0.02 0.01"/>' in inst.urdf
    assert inst.sources["inertia"] == "file" and inst.extents == pytest.approx((0.04, 0.02, 0.01), rel=EXACT)
    assert inst.mass == 0.1
    assert_point(inst.com, [0.01, 0.0, 0.002], 0.04, EXACT)
    assert_tensor(inst.inertia, np.diag([1e-5, 4e-5, 4.5e-5]), EXACT)


def test_urdf_folder_object_inertia_is_in_the_link_frame(tmp_path):
    rpy = (0.3, -0.2, 0.7853981634)
    inst = urdf_folder_instance(tmp_path, rpy)
    # URDF specification: <inertial><origin rpy> turns the inertia frame (fixed-axis x, y, z);
    # rotation rule I_link = R I R^T (any mechanics handbook; recalled from memory)
    rot = Rotation.from_euler("xyz", rpy).as_matrix()
    assert_tensor(inst.inertia, rot @ np.diag([1e-5, 4e-5, 4.5e-5]) @ rot.T, EXACT)
