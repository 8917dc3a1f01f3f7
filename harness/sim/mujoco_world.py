"""The MuJoCo world: the same operations as the pybullet world, on MuJoCo's soft-constraint solver.

MuJoCo compiles a whole scene at once, so bodies are collected in a model spec and the scene is
(re)compiled when it is next stepped or queried; a recompile keeps every joint's position and
speed. Choices that make it pass the same reference checks as pybullet (DEVELOPERS.md, Engines):
- friction: MuJoCo would take the larger of two geoms' coefficients; every pair of geoms of two
  different bodies is instead an explicit contact pair with sqrt(mu_a mu_b) (world.pair_friction),
  rolling resistance combined as pybullet does (arm_a sqrt(mu_b) + arm_b sqrt(mu_a)); links
  without a surface carry pybullet's default own coefficient (0.25: it stores 0.5 = sqrt(0.25));
  links of one body never touch each other (pybullet's default: no self-collision),
- elliptic friction cones (isotropic Coulomb, as pybullet's cone friction), Newton solver with
  `solver_iterations` as its iteration cap, implicit-in-velocity integration, impratio 10 and
  noslip iterations so static friction holds without creep,
- contacts are critically damped springs with the time constant sqrt(m / k) of a soft surface
  (stiffness k N/m in series, m the lighter dynamic body's mass), but never stiffer than two steps,
  the stiffest MuJoCo integrates stably (rigid surfaces get that); at 480 Hz that bound is about
  1.4 kN/m on a 25 g roller, so the demo grippers' 30 kN/m treads act as rigid ones (a stiffer
  spring chattered in and out of contact every other step); surface damping is not used,
- restitution is not modelled (contacts are critically damped: a drop does not bounce),
- a motor is a slip clutch behind a speed constraint, so its torque limit is solved with the
  contacts, as pybullet's motors are: each driven joint gets a second joint on the same axis (the
  motor side, with the joint's range and a small armature) held by a joint equality constraint
  whose reference moves so the side reaches the target speed in one step, and the URDF joint
  itself carries dry friction equal to the motor's effort (MuJoCo's frictionloss constraint); the
  joint's position and speed are the sum of the two. (A force-limited speed actuator chatters: one
  step of full torque on a 12 mm roller overshoots its target speed many times over; an implicit
  actuator behind the clutch upsets the clutch's solved constraint.) A position drive sets its
  target speed each step to gain x error / step, capped at the joint's speed, as pybullet's
  position motor does. Before every step the clutch's slip is handed to the motor side (the sum,
  so the links' poses, stay the same), so the motor side never winds up and its range is the
  joint's (a wound-up side reached its limit and the jaw let go of the object),
- the wrist: the hand's base hangs on three slides and three hinges along the world axes (at its
  first pose), held the same way, each moving a fifth of its error per step toward the target
  pose's joint values (pybullet's fixed constraint corrects a fifth of the pose error per step);
  its force limit is not modelled (500 N is far above what a grasp loads it with),
- semi-implicit Euler integration (everything above is a constraint; nothing needs implicit damping).
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field

import numpy as np

from ..errors import HarnessError
from .transforms import invert, multiply, rotation
from .world import JointInfo, PhysicsSettings, World, pair_friction

__all__ = ["MujocoWorld"]

DEFAULT_STORED_FRICTION = 0.5  # pybullet's default lateral friction of a link (the stored sqrt of its mu)
HARD = [0.9999, 0.9999, 0.001, 0.5, 2.0]  # solimp of the speed and clutch constraints: MuJoCo's stiffest impedance
# Inertia (kg m^2 or kg) of a motor side: a flywheel its speed constraint drives, so the links never
# feel it; heavy, because the soft constraint's largest force scales with it (at 1e-5 the jaw
# motor pushed with 1.2 N of its 2.16 N)
MOTOR_ARMATURE = 1.0
WRIST_ERP = 0.2  # share of the wrist's pose error corrected per step (pybullet's default for constraints)
RIGID_STEPS = 2.0  # rigid contact time constant in steps (MuJoCo's advised minimum)
IMPRATIO = 10.0  # friction-to-normal impedance ratio: stiffer static friction with elliptic cones
NOSLIP_ITERATIONS = 10
CONTACT_SOLIMP = [0.95, 0.99, 0.001, 0.5, 2.0]  # contact impedance: 0.95 at first touch, 0.99 past 1 mm


def _wxyz(q):
    return [q[3], q[0], q[1], q[2]]


def _xyzw(q):
    return (float(q[1]), float(q[2]), float(q[3]), float(q[0]))


@dataclass
class _Link:
    name: str
    surface: tuple = (DEFAULT_STORED_FRICTION ** 2, 0.0, None, None, 0.0, 0.0)  # mu, restitution, k, c, roll, spin
    inertial: tuple = ((0.0, 0.0, 0.0), (0.0, 0.0, 0.0, 1.0))  # COM frame in the link frame
    mj: int = -1  # MuJoCo body id once compiled
    mass: float = 0.0


@dataclass
class _Body:
    prefix: str
    links: dict  # link index (-1 base) -> _Link
    joints: list  # JointInfo per link index >= 0
    fixed: bool
    geoms: list = field(default_factory=list)  # (geom name, link index)
    link_of_name: dict = field(default_factory=dict)  # URDF link name -> link index
    origin: tuple = ((0.0, 0.0, 0.0), (0.0, 0.0, 0.0, 1.0))  # the pose it was loaded at (its URDF frame)
    root: object = None  # its base in the model spec
    wrist: dict | None = None  # the wrist's reference pose, joints and goal once added
    jnt: dict = field(default_factory=dict)  # joint index -> (qpos, dof of the joint; qpos, dof, equality of its motor side)


def _urdf_joints(path):
    """JointInfo for every URDF joint (fixed ones too, as pybullet lists them), link names and
    parent link indices, in file order."""
    root = ET.parse(path).getroot()
    joints = root.findall("joint")
    child_index = {j.find("child").get("link"): k for k, j in enumerate(joints)}
    links = [link.get("name") for link in root.findall("link")]
    base = next(name for name in links if name not in child_index)
    out = []
    for j in joints:
        limit = j.find("limit")
        fixed = j.get("type") == "fixed"
        get = (lambda key, default: float(limit.get(key, default))) if limit is not None else (lambda key, d: float(d))
        lower, upper = (0.0, -1.0) if fixed or j.get("type") == "continuous" else (get("lower", 0), get("upper", -1))
        axis = j.find("axis")
        out.append(JointInfo(
            name=j.get("name"), link_name=j.find("child").get("link"), lower=lower, upper=upper,
            effort=0.0 if fixed else get("effort", 0), speed=0.0 if fixed else get("velocity", 0),
            axis=tuple(float(x) for x in axis.get("xyz").split()) if axis is not None and not fixed else (0.0, 0.0, 0.0),
            parent=child_index.get(j.find("parent").get("link"), -1)))
    return base, out


class MujocoWorld(World):
    """A MuJoCo scene behind the World operations."""

    def __init__(self, settings: PhysicsSettings = PhysicsSettings()):
        import mujoco
        super().__init__(settings)
        self.mj = mujoco
        self.model = self.data = None
        self.reset()

    def reset(self):
        mj, s = self.mj, self.settings
        self.spec = spec = mj.MjSpec()
        spec.compiler.fusestatic = False
        o = spec.option
        o.timestep = s.time_step
        o.iterations = s.solver_iterations
        o.ls_iterations = max(50, s.solver_iterations // 2)
        o.tolerance = 1e-10
        o.cone = mj.mjtCone.mjCONE_ELLIPTIC
        o.solver = mj.mjtSolver.mjSOL_NEWTON
        o.integrator = mj.mjtIntegrator.mjINT_EULER
        o.impratio = IMPRATIO
        o.noslip_iterations = NOSLIP_ITERATIONS
        o.gravity = [0.0, 0.0, -s.gravity]
        self.model = self.data = None
        self.bodies: list[_Body] = []
        self.drives = {}  # (body, joint) -> ("velocity", speed, force) | ("position", target, force, max_speed, gain)
        self.gravity = (0.0, 0.0, -s.gravity)
        self.time = 0.0
        self.table = None
        self._dirty = True  # the spec changed since the last compile
        self._stale = False  # positions and velocities integrated since kinematics were computed
        self._geom_owner = None

    def close(self):
        self.model = self.data = self.spec = None

    # --- bodies ---------------------------------------------------------------------------

    def _add(self, body: _Body, root_spec_body, position, orientation):
        frame = self.spec.worldbody.add_frame(pos=list(position), quat=_wxyz(orientation))
        root = frame.attach_body(root_spec_body, body.prefix, "")
        self.bodies.append(body)
        index = len(self.bodies) - 1
        body.origin = (tuple(position), tuple(orientation))
        body.root = root
        if not body.fixed:
            root.add_freejoint(name=body.prefix + "free")
        for sb in self._spec_bodies(root):
            link = body.link_of_name[sb.name[len(body.prefix):]]
            for n, geom in enumerate(sb.geoms):
                geom.name = f"{body.prefix}{link}_{n}"
                geom.contype = geom.conaffinity = 0  # contacts come from explicit pairs (module doc)
                body.geoms.append((geom.name, link))
        self._dirty = True
        return index

    def _spec_bodies(self, root):
        out, todo = [], [root]
        while todo:
            b = todo.pop()
            out.append(b)
            todo.extend(b.bodies)
        return out

    def load(self, urdf_path, position=(0, 0, 0), orientation=(0, 0, 0, 1), fixed=False, implicit_cylinders=True):
        mj = self.mj
        child = mj.MjSpec.from_file(str(urdf_path))
        child.compiler.fusestatic = False
        base, joints = _urdf_joints(urdf_path)
        prefix = f"b{len(self.bodies)}/"
        links = {-1: _Link(base)}
        links.update({k: _Link(j.link_name) for k, j in enumerate(joints)})
        body = _Body(prefix, links, joints, fixed, link_of_name={link.name: k for k, link in links.items()})
        for sb in child.bodies[1:]:
            link = links[body.link_of_name[sb.name]]
            link.inertial = (tuple(sb.ipos), _xyzw(sb.iquat))
            link.mass = float(sb.mass)
        index = self._add(body, child.body(base), position, orientation)
        self._clutches(body)
        return index

    def _clutches(self, body):
        """A motor side for every driven joint (module doc)."""
        dt = self.settings.time_step
        for j in body.joints:
            if not _driven(j):
                continue
            joint = self.spec.joint(body.prefix + j.name)
            motor = joint.parent.add_joint(name=body.prefix + j.name + "/motor", type=joint.type, axis=list(joint.axis),
                                           pos=list(joint.pos), armature=MOTOR_ARMATURE)
            if j.upper >= j.lower and joint.limited != self.mj.mjtLimited.mjLIMITED_FALSE:
                motor.range = [j.lower, j.upper]
                motor.limited = self.mj.mjtLimited.mjLIMITED_TRUE
                motor.solref_limit = [RIGID_STEPS * dt, 1.0]
            joint.limited = self.mj.mjtLimited.mjLIMITED_FALSE
            joint.solref_friction = [RIGID_STEPS * dt, 1.0]
            joint.solimp_friction = HARD

    def set_surface(self, body, link, friction, restitution=0.0, stiffness=None, damping=None,
                    rolling=0.0, spinning=0.0):
        self.bodies[body].links[link].surface = (friction, restitution, stiffness, damping, rolling, spinning)
        self._dirty = True

    def add_table(self, size=(1.0, 1.0, 0.05), top=0.0, tilt=0.0, friction=None, rolling=0.0):
        mj = self.mj
        holder = mj.MjSpec()
        box = holder.worldbody.add_body(name="table")
        box.add_geom(type=mj.mjtGeom.mjGEOM_BOX, size=[s / 2 for s in size], pos=[0, 0, -size[2] / 2])
        orn = (0.0, math.sin(tilt / 2), 0.0, math.cos(tilt / 2))
        links = {-1: _Link("table")}
        body = _Body(f"b{len(self.bodies)}/", links, [], True, link_of_name={"table": -1})
        self.table = self._add(body, box, (0.0, 0.0, top), orn)
        self.set_surface(self.table, -1, self.settings.table_friction if friction is None else friction,
                         rolling=rolling)
        return self.table

    def scale_mass(self, body, factor):
        b = self.bodies[body]
        b.root.mass = b.root.mass * factor
        b.root.fullinertia = [x * factor for x in b.root.fullinertia]
        b.root.inertia = [x * factor for x in b.root.inertia]
        b.links[-1].mass *= factor
        self._dirty = True

    def com_frame(self, body):
        return self.bodies[body].links[-1].inertial

    def joints(self, body):
        return list(self.bodies[body].joints)

    def base_name(self, body):
        return self.bodies[body].links[-1].name

    # --- compiling ----------------------------------------------------------------------------

    def _pairs(self):
        """One explicit contact pair per two geoms of different bodies (not both fixed)."""
        spec, dt = self.spec, self.settings.time_step
        for pair in list(spec.pairs):
            spec.delete(pair)
        for i, a in enumerate(self.bodies):
            for b in self.bodies[i + 1:]:
                if a.fixed and b.fixed:
                    continue
                for ga, la in a.geoms:
                    for gb, lb in b.geoms:
                        self._pair(spec, dt, a, la, ga, b, lb, gb)

    def _pair(self, spec, dt, a, la, ga, b, lb, gb):
        mu_a, _, k_a, c_a, roll_a, spin_a = a.links[la].surface
        mu_b, _, k_b, c_b, roll_b, spin_b = b.links[lb].surface
        mu = pair_friction(mu_a, mu_b)
        roll = roll_a * math.sqrt(mu_b) + roll_b * math.sqrt(mu_a)
        spin = spin_a * math.sqrt(mu_b) + spin_b * math.sqrt(mu_a)
        masses = [x.links[k].mass for x, k in ((a, la), (b, lb)) if not x.fixed and x.links[k].mass > 0]
        timeconst = RIGID_STEPS * dt
        if k_a or k_b:
            # springs in series on the lighter body: its period sqrt(m / k), unless that is stiffer than
            # the stiffest contact MuJoCo integrates stably at this step
            k = 1.0 / sum(1.0 / x for x in (k_a, k_b) if x)
            timeconst = max(timeconst, math.sqrt((min(masses) if masses else 1.0) / k))
        solref = [timeconst, 1.0]
        condim = 6 if roll > 0 else (4 if spin > 0 else 3)
        spec.add_pair(geomname1=ga, geomname2=gb, condim=condim, friction=[mu, mu, spin, roll, roll],
                      solref=solref, solimp=CONTACT_SOLIMP, margin=0.0, gap=0.0)

    def _speed_constraints(self):
        """A joint equality on every motor side and wrist joint; step() moves their references."""
        spec = self.spec
        for eq in list(spec.equalities):
            spec.delete(eq)
        names = []
        for body in self.bodies:
            names += [body.prefix + j.name + "/motor" for j in body.joints if _driven(j)]
            if body.wrist is not None:
                names += [body.prefix + f"wrist{k}" for k in range(6)]
        for name in names:
            # reference acceleration -(1/dt) v - 1 x (q - c): with c = q + v_target / (d dt) the joint
            # reaches v_target in one step (d: the impedance, HARD)
            spec.add_equality(type=self.mj.mjtEq.mjEQ_JOINT, name=name, name1=name, objtype=self.mj.mjtObj.mjOBJ_JOINT,
                              solref=[-1.0, -1.0 / self.settings.time_step], solimp=HARD)

    def _compile(self):
        if not self._dirty:
            return
        self._pairs()
        self._speed_constraints()
        if self.model is None:
            self.model = self.spec.compile()
            self.data = self.mj.MjData(self.model)
        else:
            self.model, self.data = self.spec.recompile(self.model, self.data)
        m = self.model
        m.opt.gravity[:] = self.gravity
        self._geom_owner = {}
        for i, body in enumerate(self.bodies):
            for k, link in body.links.items():
                link.mj = m.body(body.prefix + link.name).id
                self._geom_owner[link.mj] = (i, k)
            body.jnt = {}
            for k, j in enumerate(body.joints):
                if _driven(j):
                    jnt, motor = m.joint(body.prefix + j.name), m.joint(body.prefix + j.name + "/motor")
                    body.jnt[k] = (int(jnt.qposadr[0]), int(jnt.dofadr[0]), int(motor.qposadr[0]),
                                   int(motor.dofadr[0]), m.equality(body.prefix + j.name + "/motor").id)
            if body.wrist is not None:
                w = body.wrist
                w["jnt"] = [(int(m.joint(f"{body.prefix}wrist{k}").qposadr[0]), int(m.joint(f"{body.prefix}wrist{k}").dofadr[0]),
                             m.equality(f"{body.prefix}wrist{k}").id) for k in range(6)]
        self._geom_body = np.array([self._geom_owner.get(int(b), (-1, -1))[0] for b in m.geom_bodyid])
        self._geom_link = np.array([self._geom_owner.get(int(b), (-1, -1))[1] for b in m.geom_bodyid])
        self._dirty = False
        self._stale = True
        self._apply_drives()

    def _apply_drives(self):
        m = self.model
        pairs = [(q, mq) for body in self.bodies for q, _, mq, _, _ in body.jnt.values()]
        self._clutch = (np.array([q for q, _ in pairs], dtype=int), np.array([mq for _, mq in pairs], dtype=int))
        self._speeds = []  # (motor qpos, equality, speed) for speed drives, held motor sides included
        self._positions = []  # (joint qpos, motor qpos, equality, target, max speed, gain)
        for i, body in enumerate(self.bodies):
            for joint, (qadr, dadr, mq, md, eq) in body.jnt.items():
                drive = self.drives.get((i, joint))
                # a joint nobody drives is free: its clutch transmits nothing
                m.dof_frictionloss[dadr] = drive[2] if drive else 0.0
                if drive and drive[0] == "position":
                    self._positions.append((qadr, mq, eq, drive[1], drive[3], drive[4]))
                else:
                    self._speeds.append((mq, eq, drive[1] if drive else 0.0))

    def _kinematics(self):
        self._compile()
        if self._stale:
            mj = self.mj
            mj.mj_kinematics(self.model, self.data)
            mj.mj_comPos(self.model, self.data)
            mj.mj_comVel(self.model, self.data)
            self._stale = False

    # --- stepping and state -------------------------------------------------------------------

    def step(self, n=1):
        self._compile()
        mj, m, d = self.mj, self.model, self.data
        for _ in range(n):
            self._prepare(m, d)
            mj.mj_step(m, d)
        self._stale = True
        self.time += n * self.settings.time_step

    def _prepare(self, m, d):
        """The harness's work before a step: hand the clutches' slip to their motor sides and move
        the speed constraints' references (module doc)."""
        dt = self.settings.time_step
        lead = 1.0 / (HARD[0] * dt)  # reference offset per unit of target speed (_speed_constraints)
        slip, motor = self._clutch
        if len(slip):
            d.qpos[motor] += d.qpos[slip]
            d.qpos[slip] = 0.0
        for mq, eq, speed in self._speeds:
            m.eq_data[eq, 0] = d.qpos[mq] + speed * lead
        for qadr, mq, eq, target, max_speed, gain in self._positions:
            error = target - d.qpos[qadr] - d.qpos[mq]
            m.eq_data[eq, 0] = d.qpos[mq] + min(max(gain * error / dt, -max_speed), max_speed) * lead
        for body in self.bodies:
            if body.wrist is not None:
                self._servo_wrist(body, m, d, dt, lead)

    def set_gravity(self, g):
        self.gravity = tuple(float(x) for x in g)
        if self.model is not None:
            self.model.opt.gravity[:] = self.gravity

    def _frame_pose(self, body, com_position, com_orientation):
        return multiply(com_position, com_orientation, *invert(*self.bodies[body].links[-1].inertial))

    def reset_pose(self, body, position, orientation):
        b = self.bodies[body]
        if b.fixed:
            raise HarnessError("a fixed body cannot be moved")
        self._compile()
        pos, orn = self._frame_pose(body, position, orientation)
        d = self.data
        if b.wrist is not None:
            self._set_wrist_joints(b, pos, orn)
        else:
            jnt = self.model.joint(b.prefix + "free")
            q, v = int(jnt.qposadr[0]), int(jnt.dofadr[0])
            d.qpos[q:q + 3] = pos
            d.qpos[q + 3:q + 7] = _wxyz(orn)
            d.qvel[v:v + 6] = 0.0
        self._stale = True

    def reset_joint(self, body, joint, position):
        self._compile()
        qadr, dadr, mq, md, _ = self.bodies[body].jnt[joint]
        self.data.qpos[[qadr, mq]] = (0.0, position)
        self.data.qvel[[dadr, md]] = 0.0
        self._stale = True

    def raw_state(self, body, link):
        self._kinematics()
        m, d = self.model, self.data
        ln = self.bodies[body].links[link]
        i = ln.mj
        vel = np.zeros(6)
        self.mj.mj_objectVelocity(m, d, self.mj.mjtObj.mjOBJ_BODY, i, vel, 0)
        orn = multiply((0, 0, 0), _xyzw(d.xquat[i]), (0, 0, 0), ln.inertial[1])[1]
        return tuple(d.xipos[i]), orn, tuple(vel[3:]), tuple(vel[:3])

    def raw_states(self, body, links):
        return {link: self.raw_state(body, link) for link in links}

    def joint_states(self, body, joints):
        self._compile()
        b, d = self.bodies[body], self.data
        return [(float(d.qpos[q] + d.qpos[mq]), float(d.qvel[v] + d.qvel[mv]))
                for q, v, mq, mv, _ in (b.jnt[j] for j in joints)]

    def link_orientation(self, body, link):
        return self.link_frame(body, link)[1]

    def link_frame(self, body, link):
        self._kinematics()
        i = self.bodies[body].links[link].mj
        return tuple(self.data.xpos[i]), _xyzw(self.data.xquat[i])

    def aabb(self, body, link=-1):
        self._kinematics()
        m, d, mj = self.model, self.data, self.mj
        i = self.bodies[body].links[link].mj
        points = []
        for g in range(m.body_geomadr[i], m.body_geomadr[i] + m.body_geomnum[i]):
            rot, centre, size, kind = d.geom_xmat[g].reshape(3, 3), d.geom_xpos[g], m.geom_size[g], m.geom_type[g]
            if kind == mj.mjtGeom.mjGEOM_MESH:
                mesh = m.geom_dataid[g]
                verts = m.mesh_vert[m.mesh_vertadr[mesh]:m.mesh_vertadr[mesh] + m.mesh_vertnum[mesh]]
                points.append(verts @ rot.T + centre)
                continue
            if kind == mj.mjtGeom.mjGEOM_SPHERE:
                half = np.full(3, size[0])
            elif kind == mj.mjtGeom.mjGEOM_BOX:
                half = np.abs(rot) @ size
            elif kind == mj.mjtGeom.mjGEOM_CYLINDER:  # a disc's extent along axis k is r sqrt(1 - a_k^2)
                axis = rot[:, 2]
                half = np.abs(axis) * size[1] + size[0] * np.sqrt(np.clip(1 - axis ** 2, 0.0, 1.0))
            elif kind == mj.mjtGeom.mjGEOM_CAPSULE:
                half = np.abs(rot[:, 2]) * size[1] + size[0]
            else:
                half = np.full(3, m.geom_rbound[g])
            points.append(np.array([centre - half, centre + half]))
        if not points:
            pos = d.xipos[i]
            return tuple(pos), tuple(pos)
        allp = np.vstack(points)
        return tuple(allp.min(axis=0)), tuple(allp.max(axis=0))

    def contacts(self, body_a, body_b, link_b=None):
        self._compile()
        m, d, mj = self.model, self.data, self.mj
        out = []
        force = np.zeros(6)
        for i in range(d.ncon):
            c = d.contact[i]
            if c.efc_address < 0:
                continue
            g1, g2 = int(c.geom[0]), int(c.geom[1])
            b1, b2 = self._geom_body[g1], self._geom_body[g2]
            if (b1, b2) == (body_a, body_b):
                flip = False
            elif (b2, b1) == (body_a, body_b):
                flip = True
            else:
                continue
            la, lb = (self._geom_link[g2], self._geom_link[g1]) if flip else (self._geom_link[g1], self._geom_link[g2])
            if link_b is not None and lb != link_b:
                continue
            mj.mj_contactForce(m, d, i, force)
            frame = c.frame.reshape(3, 3)
            n, t1, t2 = frame[0], frame[1], frame[2]  # n points from geom1 to geom2
            # geom1's surface point lies half the (negative) distance along n from the midpoint
            p1, p2 = c.pos - 0.5 * c.dist * n, c.pos + 0.5 * c.dist * n
            if flip:  # A is geom2: forces below act on geom2, n points into it
                pa, pb, sign = p2, p1, 1.0
            else:
                pa, pb, sign = p1, p2, -1.0
            out.append((0, body_a, body_b, int(la), int(lb), tuple(pa), tuple(pb), tuple(sign * n), float(c.dist),
                        float(force[0]), float(force[1]), tuple(sign * t1), float(force[2]), tuple(sign * t2)))
        return out

    def ray_hits(self, starts, ends):
        self._kinematics()
        out = []
        geom = np.zeros(1, dtype=np.int32)
        for s, e in zip(starts, ends):
            s, e = np.asarray(s, dtype=float), np.asarray(e, dtype=float)
            x = self.mj.mj_ray(self.model, self.data, s, e - s, None, 1, -1, geom)
            if 0.0 <= x <= 1.0 and geom[0] >= 0:
                out.append((int(self._geom_body[geom[0]]), tuple(s + x * (e - s))))
            else:
                out.append((-1, (0.0, 0.0, 0.0)))
        return out

    # --- drives ----------------------------------------------------------------------------

    def drive_position(self, body, joint, target, force, max_speed, gain):
        self.drives[(body, joint)] = ("position", float(target), float(force), float(max_speed), float(gain))
        if not self._dirty and self.model is not None:
            self._apply_drives()

    def drive_velocity(self, body, joint, speed, force):
        self.drives[(body, joint)] = ("velocity", float(speed), float(force))
        if not self._dirty and self.model is not None:
            self._apply_drives()

    def add_wrist(self, body, frame_in_com):
        """Replace the body's free joint by three slides and three hinges along the world axes at its
        current pose; the wrist's target is the pose of the body's URDF frame (module doc)."""
        b = self.bodies[body]
        if self.model is not None:
            self._compile()
            pos, orn = self.link_frame(body, -1)
        else:
            pos, orn = b.origin
        joint = b.root.first_joint()
        if joint is not None:
            self.spec.delete(joint)
        # the root's frame in the world stays where the spec put it; axes along world x, y, z
        ref = b.origin
        axes = rotation(ref[1]).T  # world axes seen in the body's reference frame (rows)
        for k in range(6):
            kind = self.mj.mjtJoint.mjJNT_SLIDE if k < 3 else self.mj.mjtJoint.mjJNT_HINGE
            b.root.add_joint(name=f"{b.prefix}wrist{k}", type=kind, axis=list(axes[:, k % 3]))
        b.wrist = {"ref": ref, "goal": self._wrist_joint_values(ref, pos, orn), "force": 0.0, "jnt": []}
        self._dirty = True
        if self.model is not None:
            self._compile()
            self._set_wrist_joints(b, pos, orn)
        return body

    def move_wrist(self, wrist, position, orientation, max_force):
        b = self.bodies[wrist]
        b.wrist["goal"] = self._wrist_joint_values(b.wrist["ref"], position, orientation)
        b.wrist["force"] = float(max_force)

    @staticmethod
    def _wrist_joint_values(ref, position, orientation):
        """The six wrist joints' values that put the URDF frame at a pose: the slides are the offset
        from the reference position, the hinges the intrinsic x-y-z angles of the turn from the
        reference orientation (the body turns by Rx Ry Rz in front of its reference)."""
        from scipy.spatial.transform import Rotation
        turn = rotation(orientation) @ rotation(ref[1]).T
        return [*(np.asarray(position, dtype=float) - ref[0]), *Rotation.from_matrix(turn).as_euler("XYZ")]

    def _set_wrist_joints(self, b, pos, orn):
        d = self.data
        for (qadr, dadr, _), value in zip(b.wrist["jnt"], self._wrist_joint_values(b.wrist["ref"], pos, orn)):
            d.qpos[qadr] = value
            d.qvel[dadr] = 0.0

    def _servo_wrist(self, b, m, d, dt, lead):
        """Each wrist joint moves a fifth of its error per step toward the goal pose's value (for
        the small turns a wrist makes, the same as correcting the pose error in space)."""
        for (qadr, _, eq), goal in zip(b.wrist["jnt"], b.wrist["goal"]):
            q = d.qpos[qadr]
            m.eq_data[eq, 0] = q + WRIST_ERP * (goal - q) / dt * lead

    def camera_image(self, width, height, view, projection):
        raise HarnessError("rendered replay frames need the pybullet engine (replay without frames works on mujoco)")


def _driven(joint):
    return joint.speed > 0 or joint.effort > 0
