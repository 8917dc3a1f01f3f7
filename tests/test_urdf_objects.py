"""URDF objects made elsewhere: our own corpus of lab-part files (tests/corpus) loads in every layout,
simulates without errors, reports where its numbers came from; bad files are refused before any
simulation with a message naming the file, the element and the way out; a run whose trials error is
loud about it.

Corpus (written for this project): flat/ (a cap with its own friction, a two-primitive bottle with its
own contact compliance, a two-link bracket), per-part/NNN/NNN.urdf (an OBJ drawn in millimetres with a
scale, an STL reached through package://labcell), nested/ (a holder two folders deep with a binary
STL; two files both named model.urdf), geometry/ (zero inertia on an open mesh, no <inertial> at all),
big/ (wider than any demo hand), refused/ (one defect each).
"""

from __future__ import annotations

import math
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import trimesh

import harness.campaigns.campaign
from harness.campaigns.campaign import run_payload
from harness.commands.campaign import ERROR_SHARE, ERRORED, run_campaign
from harness.cli import main
from harness.errors import SpecError
from harness.models.objects import generate
from harness.models.objects.urdf_files import _rpy, _rpy_matrix
from harness.campaigns.runs import load_run, read_campaign
from harness.models.specs import load_any

REPO = Path(__file__).resolve().parents[1]
CORPUS = REPO / "tests" / "corpus"
PARTS = CORPUS / "parts.toml"
DUO = REPO / "models" / "grippers" / "duo-roller.toml"
TOL = 1e-6  # the tolerance for mass properties against trimesh

# instance -> (size in mm from the files' geometry (worked out by hand from the URDFs), mass g, inertia from)
EXPECTED = {
    "bracket": ((50, 30, 40), 21, "file"),  # plate 50 x 30 x 4 plus a 36 mm upright standing on it
    "reagent-bottle": ((40, 40, 85), 60, "file"),  # 70 mm body plus a 15 mm neck
    "vial-cap": ((28, 28, 11), 5, "file"),
    "001": ((18, 9 * math.sqrt(3), 14), 4, "file"),  # hexagon of 9 mm corner radius, drawn in mm, scale 0.001
    "002": ((30, 16, 20), 6, "file"),
    "lids-model": ((36, 36, 16), 8, "file"),  # 6 mm disc, ball of 5 mm radius on top at z = 8 mm
    "tube-holder": ((36, 36, 32), 17, "file"),  # 8 mm foot (z -4..4), peg 24 mm long centred at z = 16
    "spacers-model": ((30, 12, 12), 6, "file"),  # a cylinder turned to lie along x
    "snap-cap": ((26, 26, 12), 3, "geometry, mass from the file"),
    "spacer-block": ((20, 20, 26), 1150 * (0.02 ** 3 + math.pi * 0.006 ** 2 * 0.006) * 1e3,
                     "geometry, density from the set"),
}


def corpus_copy(tmp_path):
    """The corpus in a scratch folder, so tests can add object sets beside it."""
    target = tmp_path / "corpus"
    shutil.copytree(CORPUS, target)
    return target


# --- loading -------------------------------------------------------------------------------------

def test_every_layout_loads_with_sizes_and_masses_from_the_files_geometry():
    instances = {i.name: i for i in generate(load_any(PARTS))}
    assert set(instances) == set(EXPECTED)
    for name, (size_mm, mass_g, inertia_from) in EXPECTED.items():
        inst = instances[name]
        assert np.allclose(np.array(inst.extents) * 1e3, size_mm, rtol=1e-6), name  # OBJ vertices: 6 decimals
        assert inst.mass * 1e3 == pytest.approx(mass_g, rel=1e-9), name
        assert inst.sources["inertia"] == inertia_from, name
        assert all(math.isfinite(x) for x in (inst.volume, *inst.com, *np.ravel(inst.inertia))), name
        # written back as one link of our own: the engine sees one body, link -1
        assert inst.urdf.count("<link ") == 1 and "<joint" not in inst.urdf, name


def test_show_prints_finite_sizes_and_masses_and_says_where_values_came_from(capsys):
    assert main(["show", str(PARTS)]) == 0
    out = capsys.readouterr().out
    rows = {line.split()[0]: line for line in out.splitlines()[2:]}
    assert set(rows) == set(EXPECTED)
    assert "nan" not in out.lower()
    for name, line in rows.items():
        size = re.search(r"(\d+\.\d) x (\d+\.\d) x (\d+\.\d)", line)
        assert size and all(float(x) > 0 for x in size.groups()), line
    assert "friction file" in rows["vial-cap"] and "friction set" in rows["snap-cap"]
    assert "friction default" in rows["bracket"] and "contact file" in rows["reagent-bottle"]
    assert "geometry, density from the set" in rows["spacer-block"]


def test_the_files_own_material_is_used_unless_the_set_overrides_it(tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "override.toml").write_text('name = "o"\nseed = 1\n[[object]]\nname = "cap"\nkind = "urdf"\n'
                                          'file = "flat/vial-cap.urdf"\nfriction = 0.3\nstiffness_n_m = 5000\n'
                                          'damping_n_s_m = 10\n')
    (own,) = [i for i in generate(load_any(PARTS)) if i.name == "vial-cap"]
    (over,) = generate(load_any(folder / "override.toml"))
    assert (own.friction, own.sources["friction"], own.stiffness) == (0.7, "file", None)
    assert (over.friction, over.sources["friction"]) == (0.3, "set")
    assert (over.stiffness, over.damping, over.sources["contact"]) == (5000, 10, "set")
    bottle = next(i for i in generate(load_any(PARTS)) if i.name == "reagent-bottle")
    assert (bottle.restitution, bottle.stiffness, bottle.damping) == (0.05, 20000, 40)


def test_file_inertia_of_a_two_link_part_is_combined_about_the_common_centre_of_mass():
    bracket = next(i for i in generate(load_any(PARTS)) if i.name == "bracket")
    # reference: the parallel-axis theorem (any mechanics textbook) applied by hand to the file's
    # two links: plate 12 g at the origin, upright 9 g at (23, 0, 20) mm, each a handbook box
    def box(m, x, y, z):
        return np.diag([y * y + z * z, x * x + z * z, x * x + y * y]) * m / 12

    pieces = [(0.012, np.zeros(3), box(0.012, 0.05, 0.03, 0.004)),
              (0.009, np.array([0.023, 0, 0.02]), box(0.009, 0.004, 0.03, 0.036))]
    mass = sum(m for m, _, _ in pieces)
    com = sum(m * c for m, c, _ in pieces) / mass
    inertia = sum(i + m * ((c - com) @ (c - com) * np.eye(3) - np.outer(c - com, c - com)) for m, c, i in pieces)
    assert bracket.mass == pytest.approx(mass, rel=1e-12)
    assert np.allclose(bracket.com, com, rtol=0, atol=1e-12)
    # the file prints 4 significant digits
    assert np.allclose(bracket.inertia, inertia, rtol=1e-3, atol=1e-3 * np.abs(inertia).max())


def test_roll_pitch_yaw_round_trips_even_at_ninety_degrees_pitch():
    for rpy in [(0.3, -0.2, 0.8), (0.0, math.pi / 2, 0.0), (1.0, -math.pi / 2, 0.4)]:
        rot = _rpy_matrix(*rpy)
        assert np.allclose(_rpy_matrix(*_rpy(rot)), rot, atol=1e-12)


# --- inertia = "geometry" against trimesh ------------------------------------------------------

GEOMETRY_SET = """name = "by-geometry"
seed = 2
[[object]]
name = "flat"
kind = "urdf-folder"
folder = "flat"
pattern = "*.urdf"
inertia = "geometry"
[[object]]
name = "one-per-folder"
kind = "urdf-folder"
folder = "per-part"
pattern = "*/*.urdf"
inertia = "geometry"
[[object]]
name = "nested"
kind = "urdf-folder"
folder = "nested"
inertia = "geometry"
mass_g = 10
[[object]]
name = "snap-cap"
kind = "urdf"
file = "geometry/zero-inertia-clip.urdf"
inertia = "geometry"
[[object]]
name = "spacer-block"
kind = "urdf"
file = "geometry/no-inertial-spacer.urdf"
inertia = "geometry"
density_kg_m3 = 1150
"""


def trimesh_reference(inst):
    """(volume, com, inertia per unit density) of the instance's collision parts, read back from the
    URDF we wrote. Reference library: trimesh, each piece on its own (analytic primitives
    trimesh.primitives.Box / Cylinder / Sphere placed by their transform, Trimesh.mass_properties for
    convex mesh parts); the union by the parallel-axis theorem (textbook)."""
    import xml.etree.ElementTree as ET
    pieces = []
    for col in ET.fromstring(inst.urdf).iter("collision"):
        origin = col.find("origin")
        xyz = np.array([float(x) for x in origin.get("xyz").split()])
        rpy = [float(x) for x in origin.get("rpy").split()]
        transform = np.eye(4)
        transform[:3, :3], transform[:3, 3] = _rpy_matrix(*rpy), xyz
        g = col.find("geometry")[0]
        if g.tag == "box":
            piece = trimesh.primitives.Box(extents=[float(x) for x in g.get("size").split()], transform=transform)
        elif g.tag == "cylinder":
            piece = trimesh.primitives.Cylinder(radius=float(g.get("radius")), height=float(g.get("length")),
                                                transform=transform)
        elif g.tag == "sphere":
            piece = trimesh.primitives.Sphere(radius=float(g.get("radius")), center=xyz)
        else:
            piece = trimesh.Trimesh(*_obj(inst.files[g.get("filename")]), process=False)
            piece.apply_transform(transform)
        pieces.append((piece.volume, piece.center_mass, piece.moment_inertia))
    volume = sum(v for v, _, _ in pieces)
    com = sum(v * c for v, c, _ in pieces) / volume
    inertia = sum(i + v * ((c - com) @ (c - com) * np.eye(3) - np.outer(c - com, c - com)) for v, c, i in pieces)
    return volume, com, inertia


def _obj(data):
    lines = data.decode().splitlines()
    vertices = [[float(x) for x in ln.split()[1:4]] for ln in lines if ln.startswith("v ")]
    faces = [[int(x) - 1 for x in ln.split()[1:4]] for ln in lines if ln.startswith("f ")]
    return np.array(vertices), np.array(faces)


def test_geometry_inertia_of_every_corpus_object_matches_trimesh(tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "geometry.toml").write_text(GEOMETRY_SET)
    instances = generate(load_any(folder / "geometry.toml"))
    assert len(instances) == len(EXPECTED)
    kinds = set()
    for inst in instances:
        volume, com, inertia = trimesh_reference(inst)
        kinds.update(re.findall(r"<(box|cylinder|sphere|mesh) ", inst.urdf))
        density = inst.mass / volume
        assert inst.volume == pytest.approx(volume, rel=TOL), inst.name
        assert np.allclose(inst.com, com, rtol=0, atol=TOL * max(inst.extents)), inst.name
        assert np.allclose(np.array(inst.inertia), inertia * density, rtol=0,
                           atol=TOL * np.abs(inertia * density).max()), inst.name
        assert inst.sources["inertia"].startswith("geometry"), inst.name
    assert kinds == {"box", "cylinder", "sphere", "mesh"}  # every collision shape was compared


def test_file_and_geometry_inertia_agree_where_the_file_is_right():
    """The single-density files of the corpus state handbook or trimesh values (rounded to 4 digits):
    the two policies must then agree to that rounding, which checks frames, scale and placement. (The
    bracket's, bottle's and holder's pieces differ in density, so their files rightly differ.)"""
    by_file = {i.name: i for i in generate(load_any(PARTS))}
    for name in ("vial-cap", "001", "002", "spacers-model"):
        inst = by_file[name]
        volume, com, inertia = trimesh_reference(inst)
        want = inertia * inst.mass / volume
        assert np.allclose(np.array(inst.inertia), want, rtol=0, atol=2e-3 * np.abs(want).max()), name
        assert np.allclose(inst.com, com, rtol=0, atol=1e-4 * max(inst.extents)), name


# --- refused files -------------------------------------------------------------------------------

GEOMETRY_HINT = 'set inertia = "geometry" on this object set entry'
REFUSED = {  # file -> (fragments of the one message, whether it suggests inertia = "geometry")
    "refused/implausible-inertia.urdf": (["radius of gyration is 3162 mm", "more than that diagonal"], True),
    "refused/not-positive-definite.urdf": (["inertia must be positive-definite; its principal moments are (-8e-07"],
                                           True),
    "refused/triangle.urdf": (["principal moments (1e-07, 1e-07, 1e-06) kg m^2 break the triangle inequality"],
                              True),
    "refused/placeholder-inertia.urdf": (["largest radius of gyration is 0.05774 mm, below 0.05 of its largest size"],
                                         True),
    "refused/zero-mass.urdf": (["link 'part' <inertial>: mass must be a finite number > 0 kg; got 0.0"], True),
    "refused/far-com.urdf": (["centre of mass (200, 0, 0) mm lies outside the collision geometry's bounding box"],
                             True),
    "geometry/zero-inertia-clip.urdf": (["link 'shell' <inertial>: inertia is zero (a common placeholder)"], True),
    "geometry/no-inertial-spacer.urdf": (["link 'block' has collision geometry but no <inertial>"], True),
    "refused/escaping-mesh.urdf": (["mesh '../../../outside.stl' leaves the object set's folder"], False),
    "refused/unknown-package.urdf": (["no folder 'nowhere' holding 'meshes/clip.stl' was found inside"], False),
    "refused/capsule-geometry.urdf": (["has <capsule> geometry; allowed: box, cylinder, sphere, mesh (OBJ or STL)"],
                                      False),
    "refused/no-collision.urdf": (["has no <collision> geometry"], False),
    "refused/hinged-lid.urdf": (["joint 'hinge' is of type 'revolute'; an object is one rigid body"], False),
    "refused/two-frictions.urdf": (["links 'grip' and 'shank' give different <contact><lateral_friction> values "
                                    "(1.2, 0.3)", "set 'friction' on the object set entry"], False),
}


@pytest.mark.parametrize("rel", sorted(REFUSED))
def test_a_bad_file_is_refused_with_one_message_naming_file_element_and_remedy(rel, tmp_path):
    folder = corpus_copy(tmp_path)
    set_file = folder / "one.toml"
    set_file.write_text(f'name = "one"\nseed = 1\n[[object]]\nname = "part"\nkind = "urdf"\nfile = "{rel}"\n')
    with pytest.raises(SpecError) as info:
        load_any(set_file)
    message = str(info.value)
    assert message.startswith(f"{set_file}: field 'object[0].file' file {rel}: "), message
    assert len(message.splitlines()) == 1
    fragments, hint = REFUSED[rel]
    for fragment in fragments:
        assert fragment in message
    assert (GEOMETRY_HINT in message) == hint


@pytest.mark.parametrize("rel", ["geometry/zero-inertia-clip.urdf", "refused/implausible-inertia.urdf"])
def test_inertia_geometry_is_the_way_out_for_bad_file_inertia(rel, tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "one.toml").write_text(f'name = "one"\nseed = 1\n[[object]]\nname = "part"\nkind = "urdf"\n'
                                     f'file = "{rel}"\ninertia = "geometry"\n')
    (inst,) = generate(load_any(folder / "one.toml"))
    assert inst.sources["inertia"] == "geometry, mass from the file"


def test_a_folder_entry_reports_every_bad_file_at_once(tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "all.toml").write_text('name = "all"\nseed = 1\n[[object]]\nname = "bad"\nkind = "urdf-folder"\n'
                                     'folder = "refused"\npattern = "*.urdf"\n')
    with pytest.raises(SpecError) as info:
        load_any(folder / "all.toml")
    assert len(info.value.problems) == len([r for r in REFUSED if r.startswith("refused/")])


@pytest.mark.parametrize("entry, field, says", [
    ('kind = "urdf-folder"\nfolder = "flat"\npattern = "../*.urdf"', "pattern",
     "must be a glob inside the folder ending in .urdf, without '..'"),
    ('kind = "urdf"\nfile = "flat/vial-cap.urdf"\ninertia = "guess"', "inertia", "must be one of 'file', 'geometry'"),
    ('kind = "urdf"\nfile = "flat/vial-cap.urdf"\nmass_g = 5', "mass_g",
     "must not be given for 'urdf' with inertia = \"file\""),
    ('kind = "urdf"\nfile = "geometry/no-inertial-spacer.urdf"\ninertia = "geometry"', "file",
     "gives no mass > 0 in any <inertial>; with inertia = \"geometry\" give mass_g or density_kg_m3"),
    ('kind = "urdf-folder"\nfolder = "flat"\npattern = "*/*.urdf"', "folder",
     "must hold at least one URDF file matching pattern '*/*.urdf'; 'flat' has none"),
])
def test_bad_entries_of_the_urdf_kinds(entry, field, says, tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "one.toml").write_text(f'name = "one"\nseed = 1\n[[object]]\nname = "part"\n{entry}\n')
    with pytest.raises(SpecError) as info:
        load_any(folder / "one.toml")
    assert f"field 'object[0].{field}'" in str(info.value) and says in str(info.value)


def test_repeated_instance_names_are_refused(tmp_path):
    folder = corpus_copy(tmp_path)
    (folder / "twice.toml").write_text('name = "t"\nseed = 1\n[[object]]\nname = "a"\nkind = "urdf-folder"\n'
                                       'folder = "flat"\npattern = "*.urdf"\n[[object]]\nname = "b"\nkind = "urdf"\n'
                                       'file = "flat/vial-cap.urdf"\n')
    (folder / "twice.toml").write_text((folder / "twice.toml").read_text().replace('name = "b"', 'name = "vial-cap"'))
    with pytest.raises(SpecError, match="gives an instance named 'vial-cap', a name entry 'a' gives too"):
        generate(load_any(folder / "twice.toml"))


# --- plan: too large for the hand ------------------------------------------------------------------

def test_plan_reports_a_part_wider_than_the_open_hand_as_unsuitable(tmp_path, capsys):
    campaign = tmp_path / "c.toml"
    campaign.write_text(f'name = "wide"\nseed = 1\ntrials = 1\nroot = "{REPO}"\n'
                        'objects = ["tests/corpus/oversize.toml"]\n[[gripper]]\nspec = "models/grippers/duo-roller.toml"\n'
                        'variants = ["duo-roller[finger.roller.radius_mm=12]"]\n[[routine]]\nname = "draw-in-grasp"\n')
    assert main(["plan", str(campaign)]) == 0
    out = capsys.readouterr().out
    # 113.6 mm: two rollers of 12 mm on 80 mm fingers at 45 mm, opened 15 deg (roller_finger.tip_opening)
    assert ("draw-in-grasp: the object is too large for the hand: tote-lid is 160 mm across at its narrowest as "
            "it rests, the open fingertips of duo-roller[finger.roller.radius_mm=12] leave 114 mm") in out
    assert "1 cell(s), 1 trial(s)" in out  # the vial cap still runs


# --- a campaign over the corpus, try, replay, report -------------------------------------------

CAMPAIGN = f"""name = "corpus"
seed = 4
trials = 1
root = "{REPO}"
objects = ["tests/corpus/parts.toml", "tests/corpus/oversize.toml"]
timeout_s = 60
[[gripper]]
spec = "models/grippers/duo-roller.toml"
variants = ["duo-roller[finger.roller.radius_mm=12]"]
[[routine]]
name = "draw-in-grasp"
[perturbation]
object_xy_mm = 2
yaw_deg = 20
"""


@pytest.fixture(scope="module")
def corpus_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("corpus-run")
    campaign = tmp / "corpus.toml"
    campaign.write_text(CAMPAIGN)
    code = run_campaign(campaign, out=tmp / "runs", workers=2, progress=False, echo=lambda *a, **k: None)
    (folder,) = (tmp / "runs").iterdir()
    return code, folder, campaign


def test_a_draw_in_campaign_over_the_corpus_has_no_error_and_the_report_builds(corpus_run, tmp_path):
    from harness.views.report import build_report
    code, folder, campaign = corpus_run
    df = load_run(folder)
    assert code == 0
    # every corpus part, and the vial cap of the second set (the tote lid is too large, so not run)
    assert sorted(df["object"]) == sorted([*EXPECTED, "vial-cap"]) and len(set(df["object_set"])) == 2
    assert not df["outcome"].isin(["error", "timeout"]).any(), df[["object", "outcome"]]
    assert df[["slip_mm", "sim_s"]].notna().all().all()
    # the run record says which file each object came from and which inertia policy gave its numbers
    sources = read_campaign(folder)["object_sets"][0]["sources"]
    assert sources["snap-cap"] == {"file": "geometry/zero-inertia-clip.urdf", "inertia": "geometry, mass from the file",
                                   "friction": "set", "restitution": "default", "contact": "rigid"}
    assert sources["vial-cap"]["inertia"] == "file" and sources["vial-cap"]["friction"] == "file"
    report = build_report(folder, tmp_path / "r.html", worst=1, campaign_file=campaign)
    # the heat map tells the two vial caps apart by their set
    assert report.images >= 3 and "Trials that failed to run" not in report.path.read_text()
    assert all(match for _, match, _ in report.replays)


def test_replay_reproduces_every_corpus_trial_bit_for_bit(corpus_run):
    from harness.views.replay import replay
    _, folder, campaign = corpus_run
    for key in load_run(folder)["trial_key"]:
        result = replay(folder, key, campaign_file=campaign)
        assert result.matches, (result.source.payload["object"], result.differences)


def test_try_runs_every_corpus_object(capsys):
    import json
    for name in EXPECTED:
        assert main(["try", str(DUO), str(PARTS), "--object", name, "--json"]) == 0
        row = json.loads(capsys.readouterr().out)
        assert row["object"] == name and row["outcome"] != "error", row
        # the 3 g open-shell snap cap may sink past the blow-up limit under a roller grip (5.8 mm at
        # 480 Hz, measured): that is `invalid`, the engine's failure, never the harness's
        assert row["outcome"] != "invalid" or name == "snap-cap", row


def test_replay_command_renders_a_multi_link_part(corpus_run, tmp_path, capsys):
    _, folder, campaign = corpus_run
    key = load_run(folder).set_index("object").loc["bracket", "trial_key"]
    code = main(["replay", str(folder), key, "--campaign", str(campaign), "--frames", str(tmp_path / "f"),
                 "--size", "64x48", "--every", "30"])
    assert code == 0, capsys.readouterr()
    assert "match: all" in capsys.readouterr().out and list((tmp_path / "f").glob("*.png"))


# --- loud error accounting ---------------------------------------------------------------------

PLANTED = {0, 2, 3}  # plan indices whose trial raises (with index 5, 4 of 11: beyond ERROR_SHARE)


def planted_run_payload(payload):
    """The campaign worker with failures planted in PLANTED trials (workers import it by name)."""
    if payload["plan_index"] in PLANTED:
        raise ValueError(f"planted failure in {payload['object']}")
    if payload["plan_index"] == 5:
        raise RuntimeError("planted second kind of failure")
    return run_payload(payload)


def test_a_run_with_failing_trials_exits_errored_and_summary_and_report_list_the_reasons_first(
        tmp_path, monkeypatch, capsys):
    from harness.commands.analysis import summary_text
    from harness.views.report import build_report
    campaign = tmp_path / "corpus.toml"
    campaign.write_text(CAMPAIGN)
    monkeypatch.setattr(harness.campaigns.campaign, "run_payload", planted_run_payload)
    said = []
    code = run_campaign(campaign, out=tmp_path / "runs", workers=2, progress=False,
                        echo=lambda *a, **k: said.append(" ".join(map(str, a))))
    assert 4 / 11 > ERROR_SHARE and code == ERRORED == 3
    assert ("4 of 11 trial(s) (36 %) ended in error or timeout, more than the 5 % allowed: exit code 3"
            in said[-1])
    (folder,) = (tmp_path / "runs").iterdir()
    df = load_run(folder)
    text = summary_text(df)
    lines = text.splitlines()
    assert lines[0] == ("4 of 11 trial(s) ended in error or timeout; by reason (replay the example trial to see "
                        "it fail):")
    assert text.index("RuntimeError: planted second kind of failure") < text.index("variant")  # before the cells
    assert text.count("ValueError: planted failure in") == 3
    assert main(["summary", str(folder)]) == 0
    assert capsys.readouterr().out.startswith("4 of 11 trial(s) ended in error")
    page = build_report(folder, tmp_path / "r.html", worst=1, campaign_file=campaign).path.read_text()
    assert page.index("Trials that failed to run") < page.index("<h2>Outcomes</h2>")
    assert "RuntimeError: planted second kind of failure" in page


def always_failing(payload):
    raise ValueError("torque_scale must be a finite length > 0 (m); got nan")


def test_report_and_summary_survive_a_run_where_every_trial_errored(tmp_path, monkeypatch, capsys):
    from harness.views.report import build_report
    campaign = tmp_path / "corpus.toml"
    campaign.write_text(CAMPAIGN.replace('objects = ["tests/corpus/parts.toml", "tests/corpus/oversize.toml"]',
                                         'objects = ["tests/corpus/oversize.toml"]'))
    monkeypatch.setattr(harness.campaigns.campaign, "run_payload", always_failing)
    code = run_campaign(campaign, out=tmp_path / "runs", workers=1, progress=False, echo=lambda *a, **k: None)
    assert code == ERRORED
    (folder,) = (tmp_path / "runs").iterdir()
    assert main(["summary", str(folder)]) == 0
    assert "ValueError: torque_scale must be a finite length > 0 (m); got nan" in capsys.readouterr().out
    page = build_report(folder, tmp_path / "r.html", worst=1, campaign_file=campaign).path.read_text()
    assert "No valid trials" in page and "got nan" in page
