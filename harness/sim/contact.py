"""Contact sampling: where an object touches another body, how hard, and how fast it slips there.

Slip at a contact is the tangential part of the relative velocity of the two material points
that touch: the object's point (v + w x (x - com)) minus the other link's point, computed from
that link's own linear and angular velocity, so a spinning roller's surface speed counts.

Timing: after a step the engine reports contact points found at the start of that step, while
velocities are the solved, end-of-step ones, and positions were integrated as x += v dt. The
lever arm that matches the solver is therefore x - (com - v dt); with the current com, a ball
rolling at 2 m/s would show a false slip of about 0.3 m/s (measured in pybullet 3.2.7).
"""

from __future__ import annotations

from dataclasses import dataclass
from math import sqrt

import numpy as np

__all__ = ["ContactSample", "sample_contacts", "add_link_slips", "step_slips", "worst_displacement", "MIN_LOAD"]

MIN_LOAD = 1e-6  # N; a link pressing less than this carries no defined slip or friction use


@dataclass(frozen=True)
class ContactSample:
    """All contacts between an object and another body at one instant (k contacts).

    points (k, 3) m; normals (k, 3) unit, pointing into the object; normal_force (k,) N;
    friction_force (k, 3) N, the tangential force on the object; slip (k, 3) m/s, tangential
    velocity of the object's material point relative to the other body's; links (k,) int;
    depth (k,) m, penetration (positive when overlapping).
    """

    points: np.ndarray
    normals: np.ndarray
    normal_force: np.ndarray
    friction_force: np.ndarray
    slip: np.ndarray
    links: np.ndarray
    depth: np.ndarray

    @property
    def count(self):
        return len(self.normal_force)

    def slip_speed(self):
        return np.linalg.norm(self.slip, axis=1)

    def slip_rows(self):
        """(link, normal force, slip velocity) of each contact, as add_link_slips takes them."""
        return zip(self.links.tolist(), self.normal_force.tolist(), self.slip.tolist())


_EMPTY = ContactSample(*(np.zeros((0, 3)),) * 2, np.zeros(0), np.zeros((0, 3)), np.zeros((0, 3)),
                       np.zeros(0, dtype=int), np.zeros(0))


def _slips(world, obj, other, obj_state):
    """(contact tuple, tangential slip (3 floats)) of every loaded contact of obj (A) with other (B).

    Written out in plain floats with one engine query for all touching links: it runs after every
    physics step while a grasp is changing."""
    # the engine keeps manifold points up to its breaking distance after bodies part; only
    # points that carried load in this step are contacts
    raw = [c for c in world.contacts(obj, other) if c[9] > 0.0]
    if not raw:
        return ()
    dt = world.settings.time_step
    (cx, cy, cz), _, (avx, avy, avz), (awx, awy, awz) = obj_state or world.raw_state(obj, -1)
    ax, ay, az = cx - avx * dt, cy - avy * dt, cz - avz * dt  # start-of-step com (module doc)
    movers = {link: (com[0] - v[0] * dt, com[1] - v[1] * dt, com[2] - v[2] * dt, *v, *w)
              for link, (com, _, v, w) in world.raw_states(other, {c[4] for c in raw}).items()}
    out = []
    for c in raw:
        a, b, n = c[5], c[6], c[7]  # normal on B points from B into A: into the object
        bx, by, bz, bvx, bvy, bvz, bwx, bwy, bwz = movers[c[4]]
        # each body's material point is taken on its own surface, against its start-of-step com
        rx, ry, rz = a[0] - ax, a[1] - ay, a[2] - az
        sx, sy, sz = b[0] - bx, b[1] - by, b[2] - bz
        ux = avx + awy * rz - awz * ry - (bvx + bwy * sz - bwz * sy)
        uy = avy + awz * rx - awx * rz - (bvy + bwz * sx - bwx * sz)
        uz = avz + awx * ry - awy * rx - (bvz + bwx * sy - bwy * sx)
        along = ux * n[0] + uy * n[1] + uz * n[2]
        out.append((c, (ux - along * n[0], uy - along * n[1], uz - along * n[2])))
    return out


def sample_contacts(world, obj, other, obj_state=None):
    """Contacts of body `obj` (as A) with body `other` (as B) and their slip velocities.

    Call right after a step. `obj_state` may pass the object's (position, orientation, velocity,
    spin) of its COM when the caller has it already.
    """
    rows = []
    for c, slip in _slips(world, obj, other, obj_state):
        on_obj, on_other, f1, d1, f2, d2 = c[5], c[6], c[10], c[11], c[12], c[13]
        rows.append((*((on_obj[i] + on_other[i]) / 2 for i in range(3)), *c[7], c[9],
                     *(f1 * d1[i] + f2 * d2[i] for i in range(3)), *slip, c[4], -c[8]))
    if not rows:
        return _EMPTY
    a = np.array(rows)
    return ContactSample(a[:, 0:3], a[:, 3:6], a[:, 6], a[:, 7:10], a[:, 10:13], a[:, 13].astype(int), a[:, 14])


def add_link_slips(rows, dt, into):
    """Add each link's slip displacement over `dt` seconds to `into` ({link: [x, y, z]}): its slip
    velocity (the normal-force-weighted mean over its points, links with at most MIN_LOAD skipped,
    as metrics.contact_load weighs slip speeds) times dt. `rows` are (link, normal force, slip
    velocity) of each contact: step_slips after a physics step, or a ContactSample's. Summed as
    vectors over a control tick, a contact that vibrates in place adds nothing. Plain floats, as
    it runs after every physics step."""
    sums = {}
    for link, fn, (sx, sy, sz) in rows:
        s = sums.setdefault(link, [0.0, 0.0, 0.0, 0.0])
        s[0] += fn
        s[1] += fn * sx
        s[2] += fn * sy
        s[3] += fn * sz
    for link, (total, x, y, z) in sums.items():
        if total > MIN_LOAD:
            d = into.setdefault(link, [0.0, 0.0, 0.0])
            d[0] += x / total * dt
            d[1] += y / total * dt
            d[2] += z / total * dt


def step_slips(world, obj, other):
    """(link, normal force, slip velocity) of each loaded contact of obj with other, without
    building a ContactSample (add_link_slips takes them)."""
    return ((c[4], c[9], slip) for c, slip in _slips(world, obj, other, None))


def worst_displacement(moved):
    """The largest link's slip distance (m) from add_link_slips's {link: displacement}."""
    return max((sqrt(x * x + y * y + z * z) for x, y, z in moved.values()), default=0.0)
