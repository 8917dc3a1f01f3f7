"""Malformed gripper specs and object sets: every one must be stopped with a clear SpecError.

Each case copies a valid demo spec (or the small URDF-family spec below) into tmp_path, spoils
it in one way by editing the TOML text, and checks three things:

1. `load_any` raises SpecError (a ValueError) whose every line starts with the file path and
   which names the offending field and says what the field allows;
2. `grasp-harness check FILE` exits 2 and prints that message on stderr, with no traceback;
3. `grasp-harness build FILE --out DIR` exits 2 and writes nothing.

The TOML is edited as text (tomli-w is not a dependency of the package or of `.[test]`), with
small helpers that find a table by its header and a key by its name, and fail loudly when the
demo file no longer has what a case expects.

Cases marked xfail(strict=True) are inputs the code does not yet handle well; they assert the
behaviour we want and start failing (XPASS) once the code is fixed, so the mark can go.
"""

from __future__ import annotations

import random
import re
import shutil
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pytest

from harness.cli import main
from harness.errors import SpecError
from harness.models.specs import load_any

MODELS = Path(__file__).resolve().parents[1] / "models"
RACK_CLIP_OBJ = MODELS / "objects" / "meshes" / "rack-clip.obj"

# --- a small valid spec of the `urdf` family (no demo of that family ships with the repo) ----------

HAND_SPEC = """\
family = "urdf"
name = "own-hand"
description = "Two revolute fingers and a camera on a fixed mount."
urdf = "hand.urdf"
friction = 0.9

[roles]
close = ["finger0_flex", "finger1_flex"]
"""

_INERTIAL = ('<inertial><origin xyz="0 0 0" rpy="0 0 0"/><mass value="{mass}"/>'
             '<inertia ixx="{ixx}" ixy="0" ixz="0" iyy="{iyy}" iyz="0" izz="{izz}"/></inertial>')


def hand_urdf(palm_ixx="1e-4", palm_mass="0.3", palm_izz="1e-4"):
    links = [("palm", palm_mass, palm_ixx, palm_izz), ("finger0", "0.05", "2e-5", "2e-5"),
             ("finger1", "0.05", "2e-5", "2e-5"), ("camera", "0.02", "1e-6", "1e-6")]
    body = "".join(f'  <link name="{n}">{_INERTIAL.format(mass=m, ixx=i, iyy=i if i != "nan" else "1e-4", izz=z)}'
                   '</link>\n' for n, m, i, z in links)
    for k, x in ((0, 0.03), (1, -0.03)):
        body += (f'  <joint name="finger{k}_flex" type="revolute"><parent link="palm"/><child link="finger{k}"/>'
                 f'<origin xyz="{x} 0 0" rpy="0 0 0"/><axis xyz="0 -1 0"/>'
                 '<limit lower="-0.2" upper="0.8" effort="2" velocity="2"/></joint>\n')
    body += ('  <joint name="camera_mount" type="fixed"><parent link="palm"/><child link="camera"/>'
             '<origin xyz="0 0.04 0" rpy="0 0 0"/></joint>\n')
    return f'<?xml version="1.0"?>\n<robot name="hand">\n{body}</robot>\n'


NAN_INERTIA_OBJECT = """<?xml version="1.0"?>
<robot name="tag"><link name="tag">
  <inertial><mass value="0.01"/><inertia ixx="nan" ixy="0" ixz="0" iyy="1e-6" iyz="0" izz="1e-6"/></inertial>
  <collision><geometry><box size="0.03 0.02 0.004"/></geometry></collision>
</link></robot>
"""

PART_URDF_OBJECT = """\
[[object]]
name = "own-parts"
kind = "urdf-folder"
folder = "parts"
friction = 0.6
"""

# --- bases: a valid spec written into a fresh folder ------------------------------------------------

BASES = {
    "duo": ("duo-roller.toml", MODELS / "grippers" / "duo-roller.toml"),
    "tri": ("scissor-roller.toml", MODELS / "grippers" / "scissor-roller.toml"),
    "jaw": ("pad-jaw.toml", MODELS / "grippers" / "pad-jaw.toml"),
    "lab": ("lab-cell.toml", MODELS / "objects" / "lab-cell.toml"),
    "stress": ("stress.toml", MODELS / "objects" / "stress.toml"),
    "hand": ("own-hand.toml", None),
}


def write_base(folder: Path, base: str) -> Path:
    """Copy base spec `base` (and the files it needs) into `folder`; return the spec path."""
    folder.mkdir(parents=True, exist_ok=True)
    name, source = BASES[base]
    if base == "hand":
        (folder / name).write_text(HAND_SPEC)
        (folder / "hand.urdf").write_text(hand_urdf())
    else:
        shutil.copyfile(source, folder / name)
    if base == "stress":
        shutil.copytree(MODELS / "objects" / "meshes", folder / "meshes")
    return folder / name


# --- text edits on TOML --------------------------------------------------------------------------

TOP = None  # the keys before the first [table] header
_HEADER = re.compile(r"^\s*\[\[?[^\]]+\]\]?\s*(#.*)?$")


def _key_of(line):
    if "=" not in line or line.lstrip().startswith("#"):
        return None
    return line.split("=", 1)[0].strip().strip('"')


def _block(lines, header, name=None):
    """(header index or -1, body start, body end) of the table `header` ([[x]] picked by its name)."""
    heads = [i for i, line in enumerate(lines) if _HEADER.match(line)]
    if header is TOP:
        return -1, 0, heads[0] if heads else len(lines)
    for i in heads:
        if lines[i].split("#")[0].strip() != header:
            continue
        end = next((j for j in heads if j > i), len(lines))
        if name is None or any(_key_of(ln) == "name" and ln.split("=", 1)[1].strip() == f'"{name}"'
                               for ln in lines[i + 1:end]):
            return i, i + 1, end
    raise AssertionError(f"test setup: no table {header} {name or ''} in the base spec")


def put(header, key, value, name=None):
    """Set `key = value` (value is TOML text) in a table, replacing the key or adding it."""
    def edit(text):
        lines = text.splitlines()
        _, start, end = _block(lines, header, name)
        for i in range(start, end):
            if _key_of(lines[i]) == key:
                lines[i] = lines[i].split("=", 1)[0].rstrip() + " = " + value
                break
        else:
            last = max([i for i in range(start, end) if lines[i].strip()], default=start - 1)
            lines.insert(last + 1, f'"{key}" = {value}' if "." in key else f"{key} = {value}")
        return "\n".join(lines) + "\n"
    return edit


def drop(header, key, name=None):
    def edit(text):
        lines = text.splitlines()
        _, start, end = _block(lines, header, name)
        hits = [i for i in range(start, end) if _key_of(lines[i]) == key]
        assert len(hits) == 1, f"test setup: key {key} not in {header}"
        del lines[hits[0]]
        return "\n".join(lines) + "\n"
    return edit


def rename(header, old, new, name=None):
    def edit(text):
        lines = text.splitlines()
        _, start, end = _block(lines, header, name)
        hits = [i for i in range(start, end) if _key_of(lines[i]) == old]
        assert len(hits) == 1, f"test setup: key {old} not in {header}"
        lines[hits[0]] = new + " =" + lines[hits[0]].split("=", 1)[1]
        return "\n".join(lines) + "\n"
    return edit


def drop_table(header, name=None):
    def edit(text):
        lines = text.splitlines()
        head, _, end = _block(lines, header, name)
        del lines[head:end]
        return "\n".join(lines) + "\n"
    return edit


def replace(old, new):
    """Raw text replacement of a fragment that occurs exactly once."""
    def edit(text):
        assert text.count(old) == 1, f"test setup: {old!r} occurs {text.count(old)} times"
        return text.replace(old, new)
    return edit


def cut_before(marker):
    """Keep only the text before the first `marker`."""
    def edit(text):
        assert marker in text
        return text[:text.index(marker)]
    return edit


def append(extra):
    return lambda text: text.rstrip("\n") + "\n\n" + extra


# --- extra files a case writes beside (or outside) the spec ------------------------------------------

def write_file(rel, data):
    """Write bytes or text at `rel`, relative to the spec's folder ('../x' lands outside it)."""
    def make(folder: Path):
        target = folder / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(data if isinstance(data, bytes) else data.encode())
    return make


def _obj_lines():
    return RACK_CLIP_OBJ.read_text().splitlines(keepends=True)


def _half_obj():
    data = RACK_CLIP_OBJ.read_bytes()
    return data[: len(data) // 2]  # cut inside the vertex list: no face left


def _open_obj():
    lines = _obj_lines()
    assert lines[-1].startswith("f ") and lines[-2].startswith("f ")
    return "".join(lines[:-2])  # two triangles missing: a hole


def _obj_with_nan_vertex():
    text = RACK_CLIP_OBJ.read_text()
    assert text.count("v 0.02 -0.012 0.034\n") == 1
    return text.replace("v 0.02 -0.012 0.034\n", "v nan -0.012 0.034\n")


def _tetra_stl(truncate=False):
    """Binary STL of a closed tetrahedron; `truncate` cuts it after the first facet."""
    pts = [(0, 0, 0), (0.02, 0, 0), (0, 0.02, 0), (0, 0, 0.02)]
    tris = [(0, 2, 1), (0, 1, 3), (0, 3, 2), (1, 2, 3)]
    data = b"\0" * 80 + struct.pack("<I", len(tris))
    for tri in tris:
        data += struct.pack("<3f", 0, 0, 0) + b"".join(struct.pack("<3f", *pts[k]) for k in tri) + b"\0\0"
    return data[: 84 + 50 + 20] if truncate else data


def _make_dir(rel):
    def make(folder: Path):
        (folder / rel).mkdir(parents=True)
    return make


# --- the corpus ------------------------------------------------------------------------------------

@dataclass
class Case:
    id: str
    base: str
    edits: tuple[Callable[[str], str], ...] = ()
    files: tuple[Callable[[Path], None], ...] = ()
    fields: tuple[str, ...] = ()  # field paths the message must name
    says: tuple[str, ...] = ()  # fragments the message must contain (what is allowed, what was got)
    pattern: str | None = None  # a regular expression the message must match
    target: str | None = None  # load this path (relative to the spec folder) instead of the spec
    xfail: str | None = None


MESH = dict(name="rack-clip")
BALL = dict(name="ball")
RING = dict(name="seal-ring")
VIAL = dict(name="vial")

CASES = [
    # --- gripper specs: missing fields and wrong types -------------------------------------------
    Case("missing_field_roller_width", "tri", (drop("[finger.roller]", "width_mm"),),
         fields=("finger.roller.width_mm",), says=("is missing; it must be a number > 0",)),
    Case("missing_table_finger_pivot", "duo", (drop_table("[finger.pivot]"),),
         fields=("finger.pivot",), says=("is missing; it must be a table",)),
    Case("missing_gripper_name", "jaw", (drop(TOP, "name"),),
         fields=("name",), says=("must be a non-empty text naming the gripper",)),
    Case("text_where_number_needed", "duo", (put("[finger]", "length_mm", '"eighty"'),),
         fields=("finger.length_mm",), says=("must be a number > 0; got 'eighty'",)),
    Case("list_where_table_needed", "duo", (drop_table("[finger.flex]"), put("[finger]", "flex", "[-15, 40]")),
         fields=("finger.flex",), says=("must be a table; got [-15, 40]",)),
    # --- gripper specs: values out of range ------------------------------------------------------
    Case("negative_roller_radius", "tri", (put("[finger.roller]", "radius_mm", "-3"),),
         fields=("finger.roller.radius_mm",), says=("must be a number > 0; got -3",)),
    Case("zero_palm_thickness", "duo", (put("[palm]", "thickness_mm", "0"),),
         fields=("palm.thickness_mm",), says=("must be a number > 0; got 0",)),
    Case("nan_roller_friction", "duo", (put("[finger.roller]", "friction", "nan"),),
         fields=("finger.roller.friction",), says=("must be a number > 0 and <= 10; got nan",)),
    Case("inf_finger_length", "duo", (put("[finger]", "length_mm", "inf"),),
         fields=("finger.length_mm",), says=("must be a number > 0; got inf",)),
    Case("pivot_upper_beyond_joint_range", "duo", (put("[finger.pivot]", "upper_deg", "200"),),
         fields=("finger.pivot.upper_deg",), says=("must be a number >= -180 and <= 180; got 200",)),
    Case("flex_lower_not_below_upper", "duo", (put("[finger.flex]", "lower_deg", "40"),),
         fields=("finger.flex.upper_deg",), says=("must be greater than lower_deg (40)",)),
    Case("finger_count_1", "duo", (put("[finger]", "count", "1"),),
         fields=("finger.count",), says=("must be a whole number >= 2 and <= 4; got 1",)),
    Case("finger_count_5", "duo", (put("[finger]", "count", "5"),),
         fields=("finger.count",), says=("must be a whole number >= 2 and <= 4; got 5",)),
    Case("angles_deg_length_mismatch", "tri", (put("[finger]", "angles_deg", "[0, 180]"),),
         fields=("finger.angles_deg",), says=("must list one angle per finger (4); got 2",)),
    # bases 42 mm out, 20 deg apart: 14.6 mm between centres, under the 21.1 mm finger diagonal
    Case("fingers_colliding_in_the_palm", "tri", (put("[finger]", "angles_deg", "[0, 20, 180, 230]"),),
         fields=("finger.angles_deg",),
         says=("fingers 0 and 1 (at 0 and 20 deg) collide in the palm: their bases are 14.6 mm apart, "
               "less than 21.1 mm",)),
    Case("placement_angle_beyond_a_turn", "tri", (put("[finger]", "angles_deg", "[0, 50, 180, 400]"),),
         fields=("finger.angles_deg",), says=("must be a list of numbers >= -360 and <= 360",)),
    Case("jaw_stroke_longer_than_half_opening", "jaw", (put("[jaw]", "stroke_mm", "39"),),
         fields=("jaw.stroke_mm",), says=("must be at most half the opening (38 mm)",)),
    Case("pad_stiffness_without_damping", "jaw", (drop("[pad]", "damping_n_s_m"),),
         fields=("pad.damping_n_s_m",), says=("is missing; it must be a number >= 0",)),
    # --- gripper specs: unknown names ------------------------------------------------------------
    Case("unknown_family_near_miss", "duo", (put(TOP, "family", '"roller-fingers"'),),
         fields=("family",), says=("must be one of 'roller-finger', 'jaw', 'urdf'; got 'roller-fingers'",
                                   "did you mean 'roller-finger'?")),
    Case("unknown_family", "duo", (put(TOP, "family", '"octopus"'),),
         fields=("family",), says=("must be one of 'roller-finger', 'jaw', 'urdf'; got 'octopus'",)),
    Case("family_given_as_list", "duo", (put(TOP, "family", '["roller-finger"]'),),
         fields=("family",), says=("must be one of 'roller-finger', 'jaw', 'urdf'; got ['roller-finger']",)),
    Case("misspelled_key_raduis_mm", "tri", (rename("[finger.roller]", "radius_mm", "raduis_mm"),),
         fields=("finger.roller.raduis_mm", "finger.roller.radius_mm"),
         says=("is not a known key; did you mean 'radius_mm'?", "is missing; it must be a number > 0")),
    Case("misspelled_key_radius_m", "tri", (rename("[finger.roller]", "radius_mm", "radius_m"),),
         fields=("finger.roller.radius_m",), says=("is not a known key; did you mean 'radius_mm'?",)),
    Case("unknown_top_level_key_gripper", "duo", (put(TOP, "colour", '"red"'),),
         fields=("colour",), says=("is not a known key",),
         pattern=r"known keys: [^\n]*\bdescription\b[^\n]*\bsweep\b"),
    Case("misspelled_top_level_description", "duo", (rename(TOP, "description", "descripton"),),
         fields=("descripton",), says=("is not a known key; did you mean 'description'?",)),
    # --- gripper specs: sweeps -------------------------------------------------------------------
    Case("sweep_unknown_parameter", "duo",
         (rename("[sweep]", "finger.roller.radius_mm", '"finger.roller.diameter_mm"'),),
         fields=("sweep.finger.roller.diameter_mm",), says=("must name a parameter of family 'roller-finger'",)),
    Case("sweep_misspelled_parameter", "duo",
         (rename("[sweep]", "finger.roller.radius_mm", '"finger.roller.raduis_mm"'),),
         fields=("sweep.finger.roller.raduis_mm",), says=("did you mean 'finger.roller.radius_mm'?",)),
    Case("sweep_empty_list", "duo", (put("[sweep]", "finger.roller.radius_mm", "[]"),),
         fields=("sweep.finger.roller.radius_mm",), says=("must be a non-empty list of values; got []",)),
    Case("sweep_not_a_table", "duo", (drop_table("[sweep]"), put(TOP, "sweep", "[10, 12]")),
         fields=("sweep",), says=("must be a table of 'dotted.key = [values]'; got [10, 12]",)),
    Case("sweep_value_invalidates_variant", "duo", (put("[sweep]", "finger.roller.radius_mm", "[10, 12, -1]"),),
         fields=("finger.roller.radius_mm",),
         says=("must be a number > 0; got -1 (in sweep variant finger.roller.radius_mm=-1)",)),
    Case("sweep_value_breaks_cross_check", "duo", (put("[sweep]", "finger.roller.radius_mm", "[10, 5]"),),
         fields=("finger.roller.radius_mm",),
         says=("must exceed half the finger thickness (6 mm)", "(in sweep variant finger.roller.radius_mm=5)")),
    # --- gripper specs: the urdf family ----------------------------------------------------------
    Case("urdf_file_missing", "hand", (put(TOP, "urdf", '"no-such-hand.urdf"'),),
         fields=("urdf",), says=("must name an existing file relative to", "got 'no-such-hand.urdf' (not found)")),
    Case("urdf_path_escapes_folder", "hand", (put(TOP, "urdf", '"../hand.urdf"'),),
         files=(write_file("../hand.urdf", hand_urdf()),),
         fields=("urdf",), says=("must name a path inside the spec's folder", "got '../hand.urdf', which leaves it")),
    Case("urdf_role_names_missing_joint", "hand", (put("[roles]", "close", '["finger0_flex", "finger9_flex"]'),),
         fields=("roles.close",),
         says=("names joint 'finger9_flex', which hand.urdf lacks; "
               "its movable joints are ['finger0_flex', 'finger1_flex']",)),
    Case("urdf_role_names_fixed_joint", "hand", (put("[roles]", "close", '["finger0_flex", "camera_mount"]'),),
         fields=("roles.close",), says=("joint 'camera_mount' must be of type revolute or prismatic; got 'fixed'",)),
    Case("urdf_nan_inertia", "hand", files=(write_file("hand.urdf", hand_urdf(palm_ixx="nan")),),
         fields=("urdf",),
         says=("link 'palm' of hand.urdf must have a finite mass > 0 and inertia diagonal > 0", "diagonal [nan,")),
    Case("urdf_link_inertia_impossible", "hand", files=(write_file("hand.urdf", hand_urdf(palm_izz="5e-4")),),
         fields=("urdf",),
         says=("link 'palm' of hand.urdf <inertial>: principal moments (0.0001, 0.0001, 0.0005) kg m^2 break the "
               "triangle inequality I1 + I2 >= I3",)),
    Case("roller_larger_than_finger", "duo", (replace("radius_mm = 12\nwidth_mm = 18", "radius_mm = 1200\nwidth_mm = 18"),),
         fields=("finger.roller.radius_mm",), says=("must not exceed the finger length (80 mm); got 1200",)),
    Case("urdf_not_xml", "hand", files=(write_file("hand.urdf", "<robot><link name='palm'>"),),
         fields=("urdf",), says=("must be a readable URDF (XML)",)),
    # --- object sets -----------------------------------------------------------------------------
    Case("unknown_object_kind_near_miss", "lab", (put("[[object]]", "kind", '"sphear"', **BALL),),
         fields=("object[7].kind",), says=("got 'sphear'; did you mean 'sphere'?",)),
    Case("unknown_object_kind", "lab", (put("[[object]]", "kind", '"teapot"', **BALL),),
         fields=("object[7].kind",), says=("must be one of box, capsule, cup, cylinder", "got 'teapot'")),
    Case("object_kind_given_as_list", "lab", (put("[[object]]", "kind", '["sphere"]', **BALL),),
         fields=("object[7].kind",), says=("must be one of box, capsule", "got ['sphere']")),
    Case("object_entry_not_a_table", "lab", (cut_before("[[object]]"), append("object = [1, 2]\n")),
         fields=("object[0]",), says=("must be a table",)),
    Case("misspelled_object_key", "lab", (rename("[[object]]", "radius_mm", "raduis_mm", **BALL),),
         fields=("object[7].raduis_mm", "object[7].radius_mm"), says=("did you mean 'radius_mm'?",)),
    Case("misspelled_object_unit", "lab", (rename("[[object]]", "mass_g", "mass_kg", **BALL),),
         fields=("object[7].mass_kg",), says=("is not a known key; did you mean 'mass_g'?",)),
    Case("unknown_top_level_key_object_set", "lab", (put(TOP, "colour", '"red"'),),
         fields=("colour",), says=("is not a known key; known keys: name, seed, description, object",)),
    Case("object_negative_size", "lab", (put("[[object]]", "height_mm", "[-40, 55]", **VIAL),),
         fields=("object[0].height_mm",), says=("must be a number or a range [low, high] > 0; got [-40, 55]",)),
    Case("object_zero_size", "lab", (put("[[object]]", "radius_mm", "0", **BALL),),
         fields=("object[7].radius_mm",), says=("must be a number or a range [low, high] > 0; got 0",)),
    Case("object_text_where_number_needed", "lab", (put("[[object]]", "radius_mm", '"20"', **BALL),),
         fields=("object[7].radius_mm",), says=("must be a number or a range [low, high] > 0; got '20'",)),
    Case("object_nan_friction", "lab", (put("[[object]]", "friction", "nan", **BALL),),
         fields=("object[7].friction",), says=("> 0 and <= 10; got nan",)),
    Case("object_inf_mass", "lab", (put("[[object]]", "mass_g", "inf", **BALL),),
         fields=("object[7].mass_g",), says=("must be a number or a range [low, high] > 0; got inf",)),
    Case("range_given_high_low", "lab", (put("[[object]]", "radius_mm", "[9, 7.5]", **VIAL),),
         fields=("object[0].radius_mm",), says=("with low <= high; got [9, 7.5]",)),
    Case("empty_object_set", "lab", (cut_before("[[object]]"),),
         fields=("object",), says=("must list at least one object kind as [[object]] tables; the set is empty",)),
    Case("duplicate_object_names", "lab", (put("[[object]]", "name", '"vial"', name="screw-cap"),),
         fields=("object[1].name",), says=("must be unique within the set; 'vial' is used twice",)),
    Case("mass_and_density_both_given", "lab", (put("[[object]]", "density_kg_m3", "1000", **BALL),),
         fields=("object[7].mass_g",), says=("'density_kg_m3' must be given, exactly one of them",)),
    Case("neither_mass_nor_density", "lab", (drop("[[object]]", "mass_g", **BALL),),
         fields=("object[7].mass_g",), says=("'density_kg_m3' must be given, exactly one of them",)),
    Case("ring_inner_radius_not_below_outer", "lab", (put("[[object]]", "inner_radius_mm", "20", **RING),),
         fields=("object[5].inner_radius_mm",), says=("must stay below outer_radius_mm for every draw",)),
    Case("stiffness_without_damping", "lab", (drop("[[object]]", "damping_n_s_m", **RING),),
         fields=("object[5].stiffness_n_m",), says=("'damping_n_s_m' must be given together",)),
    Case("negative_seed", "lab", (put(TOP, "seed", "-1"),),
         fields=("seed",), says=("must be a whole number >= 0; got -1",)),
    Case("missing_seed", "lab", (drop(TOP, "seed"),),
         fields=("seed",), says=("is missing",)),
    # --- object sets: files ----------------------------------------------------------------------
    Case("mesh_file_missing", "stress", (put("[[object]]", "file", '"meshes/no-such.obj"', **MESH),),
         fields=("object[8].file",), says=("must name an existing file relative to", "(not found)")),
    Case("mesh_path_escapes_folder", "stress", (put("[[object]]", "file", '"../x.obj"', **MESH),),
         files=(write_file("../x.obj", RACK_CLIP_OBJ.read_bytes()),),
         fields=("object[8].file",), says=("must name a path inside the spec's folder", "got '../x.obj', which leaves it")),
    Case("mesh_wrong_suffix", "stress", (put("[[object]]", "file", '"meshes/clip.txt"', **MESH),),
         files=(write_file("meshes/clip.txt", RACK_CLIP_OBJ.read_bytes()),),
         fields=("object[8].file",), says=("must be an OBJ or STL file; got 'meshes/clip.txt'",)),
    Case("mesh_junk_bytes", "stress", files=(write_file("meshes/rack-clip.obj", random.Random(7).randbytes(3000)),),
         fields=("object[8].file",), says=("must be a readable closed mesh; 'meshes/rack-clip.obj' holds no triangles",)),
    Case("mesh_truncated_obj", "stress", files=(write_file("meshes/rack-clip.obj", _half_obj()),),
         fields=("object[8].file",), says=("must be a readable closed mesh; 'meshes/rack-clip.obj'",),
         pattern=r"rack-clip\.obj' (holds no triangles|is truncated|is incomplete|is not a closed solid)"),
    Case("mesh_truncated_stl", "stress", (put("[[object]]", "file", '"meshes/tetra.stl"', **MESH),),
         files=(write_file("meshes/tetra.stl", _tetra_stl(truncate=True)),),
         fields=("object[8].file",), says=("must be a readable closed mesh; 'meshes/tetra.stl' holds no triangles",)),
    Case("mesh_not_watertight", "stress", files=(write_file("meshes/rack-clip.obj", _open_obj()),),
         fields=("object[8].file",), says=("is not a closed solid (not watertight), so it has no volume",)),
    Case("mesh_nan_vertex", "stress",
         files=(write_file("meshes/rack-clip.obj", _obj_with_nan_vertex()),),
         fields=("object[8].file",), says=("must be a readable closed mesh; 'meshes/rack-clip.obj'",),
         pattern=r"not (a )?finite"),
    Case("urdf_folder_missing", "lab", (append(PART_URDF_OBJECT.replace('"parts"', '"no-such-parts"')),),
         fields=("object[8].folder",), says=("must name an existing folder relative to", "(not found)")),
    Case("urdf_folder_without_urdf", "lab", (append(PART_URDF_OBJECT),), files=(_make_dir("parts"),),
         fields=("object[8].folder",), says=("must hold at least one URDF file matching pattern '**/*.urdf'; 'parts' has none",)),
    Case("urdf_folder_nan_inertia", "lab", (append(PART_URDF_OBJECT),),
         files=(write_file("parts/tag.urdf", NAN_INERTIA_OBJECT),),
         fields=("object[8].folder",),
         says=("file tag.urdf: link 'tag' <inertial> <inertia ixx> must be 1 finite number(s); got 'nan'",
               'set inertia = "geometry" on this object set entry')),
    Case("urdf_folder_with_mass", "lab", (append(PART_URDF_OBJECT + "mass_g = 40\n"),),
         files=(write_file("parts/palm.urdf", hand_urdf()),),
         fields=("object[8].mass_g",), says=("must not be given for 'urdf-folder'",)),
    Case("urdf_folder_with_density", "lab", (append(PART_URDF_OBJECT + "density_kg_m3 = 1200\n"),),
         files=(write_file("parts/palm.urdf", hand_urdf()),),
         fields=("object[8].density_kg_m3",), says=("must not be given for 'urdf-folder' with inertia = \"file\"",)),
    # --- files that are not specs at all ---------------------------------------------------------
    Case("not_valid_toml", "duo", (replace("count = 2\n", "count = \n"),),
         says=("is not valid TOML: Invalid value (at line 12",)),
    Case("nonexistent_file", "duo", target="no-such-spec.toml", says=("file not found",)),
    Case("directory_instead_of_file", "duo", files=(_make_dir("a-folder.toml"),), target="a-folder.toml",
         says=("is not a regular file",)),
    Case("not_utf8_text", "duo", files=(write_file("latin1.toml", 'name = "gr\xfcn"\n'.encode("latin-1")),),
         target="latin1.toml", says=("cannot be read as TOML text",)),
    Case("neither_gripper_nor_object_set", "duo", (cut_before("[palm]"), drop(TOP, "family")),
         says=("is neither a gripper spec (needs a 'family' key) nor an object set",)),
]


def _param(case):
    marks = [pytest.mark.xfail(strict=True, reason=case.xfail)] if case.xfail else []
    return pytest.param(case, id=case.id, marks=marks)


def make(case: Case, tmp_path: Path) -> Path:
    folder = tmp_path / "spec"
    spec = write_base(folder, case.base)
    text = spec.read_text()
    for edit in case.edits:
        text = edit(text)
    spec.write_text(text)
    for extra in case.files:
        extra(folder)
    return folder / case.target if case.target else spec


def test_corpus_is_large_and_unique():
    ids = [c.id for c in CASES]
    assert len(ids) == len(set(ids))
    assert len(CASES) >= 30


@pytest.mark.parametrize("base", sorted(BASES))
def test_base_spec_is_valid(base, tmp_path, capsys):
    """Every base the corpus spoils loads cleanly, so each case's error comes from its own edit."""
    spec = write_base(tmp_path / "spec", base)
    load_any(spec)
    assert main(["check", str(spec)]) == 0
    assert "ok: " in capsys.readouterr().out


def test_whole_stl_is_valid(tmp_path):
    """The STL the truncation case cuts short is a valid closed mesh when whole."""
    spec = write_base(tmp_path / "spec", "stress")
    spec.write_text(put("[[object]]", "file", '"meshes/tetra.stl"', **MESH)(spec.read_text()))
    write_file("meshes/tetra.stl", _tetra_stl())(spec.parent)
    load_any(spec)


@pytest.mark.parametrize("case", [_param(c) for c in CASES])
def test_bad_input_is_reported(case: Case, tmp_path, capsys):
    path = make(case, tmp_path)

    # 1. load_any: one SpecError (a ValueError) naming the file, the field and what is allowed
    with pytest.raises(SpecError) as info:
        load_any(path)
    assert isinstance(info.value, ValueError)
    message = str(info.value)
    for line in message.splitlines():
        assert line.startswith(f"{path}: "), f"line does not name the file: {line!r}"
    for f in case.fields:
        assert f"field '{f}'" in message
    for fragment in case.says:
        assert fragment in message
    if case.pattern:
        assert re.search(case.pattern, message), f"{case.pattern!r} not in {message!r}"

    # 2. check: exit code 2, the message on stderr, no traceback
    capsys.readouterr()
    assert main(["check", str(path)]) == 2
    out, err = capsys.readouterr()
    assert f"error: {message}" in err
    assert "Traceback" not in out + err
    assert "ok:" not in out

    # 3. build: exit code 2 and nothing written
    out_dir = tmp_path / "out"
    assert main(["build", str(path), "--out", str(out_dir)]) == 2
    out, err = capsys.readouterr()
    assert f"error: {message}" in err
    assert "Traceback" not in out + err
    assert not out_dir.exists() or not any(out_dir.iterdir())


# --- several problems in one file: all reported at once -----------------------------------------------

def test_gripper_spec_reports_every_problem_in_one_error(tmp_path, capsys):
    spec = write_base(tmp_path / "spec", "duo")
    text = spec.read_text()
    for edit in (put("[palm]", "thickness_mm", "0"),
                 put("[finger]", "count", "5"),
                 put("[finger.pivot]", "upper_deg", "200"),
                 rename("[finger.roller]", "width_mm", "widht_mm"),
                 put("[finger.pad]", "friction", "nan"),
                 put("[sweep]", "finger.roller.diameter_mm", "[20, 24]"),
                 put(TOP, "description", "42")):
        text = edit(text)
    spec.write_text(text)
    expected = {
        "palm.thickness_mm": "must be a number > 0; got 0",
        "finger.count": "must be a whole number >= 2 and <= 4; got 5",
        "finger.pivot.upper_deg": "must be a number >= -180 and <= 180; got 200",
        "finger.roller.widht_mm": "is not a known key; did you mean 'width_mm'?",
        "finger.roller.width_mm": "is missing; it must be a number > 0",
        "finger.pad.friction": "got nan",
        "sweep.finger.roller.diameter_mm": "must name a parameter of family 'roller-finger'",
        "description": "must be a text; got 42",
    }
    with pytest.raises(SpecError) as info:
        load_any(spec)
    problems = dict(info.value.problems)
    assert set(expected) <= set(problems), f"missing: {set(expected) - set(problems)}"
    for f, fragment in expected.items():
        assert fragment in problems[f]
    assert len(str(info.value).splitlines()) == len(info.value.problems) >= len(expected)

    assert main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    for f in expected:
        assert f"field '{f}'" in err


def test_object_set_reports_every_problem_in_one_error(tmp_path, capsys):
    spec = write_base(tmp_path / "spec", "lab")
    text = spec.read_text()
    for edit in (put(TOP, "seed", "-1"),
                 put("[[object]]", "radius_mm", "[6.5, 5.5]", name="sample-tube"),
                 put("[[object]]", "name", '"vial"', name="screw-cap"),
                 put("[[object]]", "inner_radius_mm", "20", **RING),
                 put("[[object]]", "kind", '"teapot"', **BALL),
                 drop("[[object]]", "density_kg_m3", name="pebble")):
        text = edit(text)
    spec.write_text(text)
    expected = {
        "seed": "must be a whole number >= 0; got -1",
        "object[4].radius_mm": "with low <= high; got [6.5, 5.5]",
        "object[1].name": "'vial' is used twice",
        "object[5].inner_radius_mm": "must stay below outer_radius_mm",
        "object[6].mass_g": "exactly one of them",
        "object[7].kind": "got 'teapot'",
    }
    with pytest.raises(SpecError) as info:
        load_any(spec)
    problems = dict(info.value.problems)
    assert set(expected) <= set(problems), f"missing: {set(expected) - set(problems)}"
    for f, fragment in expected.items():
        assert fragment in problems[f]

    assert main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    for f in expected:
        assert f"field '{f}'" in err


def test_sweep_value_problem_reported_with_base_problem(tmp_path):
    spec = write_base(tmp_path / "spec", "duo")
    text = put("[palm]", "thickness_mm", "0")(spec.read_text())
    spec.write_text(put("[sweep]", "finger.roller.radius_mm", "[10, 12, -1]")(text))
    with pytest.raises(SpecError) as info:
        load_any(spec)
    message = str(info.value)
    assert "field 'palm.thickness_mm' must be a number > 0; got 0" in message
    assert "got -1 (in sweep variant finger.roller.radius_mm=-1)" in message


def test_duplicate_name_reported_when_first_entry_has_other_problem(tmp_path):
    spec = write_base(tmp_path / "spec", "lab")
    text = put("[[object]]", "radius_mm", "[9, 7.5]", **VIAL)(spec.read_text())
    spec.write_text(put("[[object]]", "name", '"vial"', name="screw-cap")(text))
    with pytest.raises(SpecError) as info:
        load_any(spec)
    message = str(info.value)
    assert "field 'object[0].radius_mm'" in message
    assert "field 'object[1].name' must be unique within the set; 'vial' is used twice" in message


def test_sweep_key_written_without_quotes(tmp_path):
    """`finger.roller.radius_mm = [...]` under [sweep] is ordinary TOML; it must work or be explained."""
    spec = write_base(tmp_path / "spec", "duo")
    spec.write_text(replace('"finger.roller.radius_mm" =', "finger.roller.radius_mm =")(spec.read_text()))
    try:
        loaded = load_any(spec)
    except SpecError as exc:
        message = str(exc)
        assert "sweep.finger.roller.radius_mm" in message or "quote" in message, message
        assert "did you mean 'finger.count'" not in message
    else:
        assert len(loaded.variants) == 3


def test_check_reports_each_file_and_fails_if_any_is_bad(tmp_path, capsys):
    good = write_base(tmp_path / "good", "jaw")
    bad = write_base(tmp_path / "bad", "jaw")
    bad.write_text(put("[jaw]", "force_n", "-40")(bad.read_text()))
    assert main(["check", str(bad), str(good)]) == 2
    out, err = capsys.readouterr()
    assert f"ok: {good}" in out
    assert f"{bad}: field 'jaw.force_n' must be a number > 0; got -40" in err
    assert "Traceback" not in out + err
