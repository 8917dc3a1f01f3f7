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

import numpy as np

__all__ = ["ContactSample", "sample_contacts", "point_velocity"]


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


def point_velocity(com, v, w, x):
    """Velocity (k, 3) of material points x (k, 3) of a rigid body with COM velocity v and spin w;
    com, v and w are (3,) for one body or (k, 3), one row per point."""
    r = x - com
    w = np.broadcast_to(w, r.shape)
    # w x r written out: np.cross costs about 40 us per call on these tiny arrays, this about 5
    return v + np.column_stack((w[:, 1] * r[:, 2] - w[:, 2] * r[:, 1], w[:, 2] * r[:, 0] - w[:, 0] * r[:, 2],
                                w[:, 0] * r[:, 1] - w[:, 1] * r[:, 0]))


_EMPTY = ContactSample(*(np.zeros((0, 3)),) * 2, np.zeros(0), np.zeros((0, 3)), np.zeros((0, 3)),
                       np.zeros(0, dtype=int), np.zeros(0))


def sample_contacts(world, obj, other, link_states=None, obj_state=None):
    """Contacts of body `obj` (as A) with body `other` (as B) and their slip velocities.

    Call right after a step. `link_states` may pass a dict to share link queries between calls,
    `obj_state` the object's `world.link_state(obj, -1)` when the caller has it already.
    """
    # the engine keeps manifold points up to its breaking distance after bodies part; only
    # points that carried load in this step are contacts
    raw = [c for c in world.contacts(obj, other) if c[9] > 0.0]
    if not raw:
        return _EMPTY
    # one array, one row per contact: on_obj (3), on_other (3), normal (3), distance, normal force,
    # friction 1, direction 1 (3), friction 2, direction 2 (3), link on `other`
    a = np.array([(*c[5], *c[6], *c[7], c[8], c[9], c[10], *c[11], c[12], *c[13], c[4]) for c in raw])
    on_obj, on_other, normals = a[:, 0:3], a[:, 3:6], a[:, 6:9]  # normal on B points from B into A: into the object
    points = (on_obj + on_other) / 2
    fn = a[:, 10]
    friction = a[:, 11:12] * a[:, 12:15] + a[:, 15:16] * a[:, 16:19]
    links = a[:, 19].astype(int)
    dt = world.settings.time_step
    com, _, v, w = obj_state or world.link_state(obj, -1)
    states = {} if link_states is None else link_states
    for link in set(links.tolist()):
        if link not in states:
            states[link] = world.link_state(other, link)
    # per contact, the touching link's com, velocity and spin, stacked as (k, 3) arrays
    lcom, lv, lw = (np.array([states[link][i] for link in links.tolist()]) for i in (0, 2, 3))
    # each body's material point is taken on its own surface, against its start-of-step com
    rel = point_velocity(com - v * dt, v, w, on_obj) - point_velocity(lcom - lv * dt, lv, lw, on_other)
    slip = rel - np.sum(rel * normals, axis=1, keepdims=True) * normals
    return ContactSample(points, normals, fn, friction, slip, links, -a[:, 9])
