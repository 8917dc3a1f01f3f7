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
    """Velocity (k, 3) of material points x (k, 3) of a rigid body with COM velocity v and spin w."""
    r = x - com
    # w x r written out: np.cross costs about 40 us per call on these tiny arrays, this about 5
    return v + np.column_stack((w[1] * r[:, 2] - w[2] * r[:, 1], w[2] * r[:, 0] - w[0] * r[:, 2],
                                w[0] * r[:, 1] - w[1] * r[:, 0]))


_EMPTY = ContactSample(*(np.zeros((0, 3)),) * 2, np.zeros(0), np.zeros((0, 3)), np.zeros((0, 3)),
                       np.zeros(0, dtype=int), np.zeros(0))


def sample_contacts(world, obj, other, link_states=None):
    """Contacts of body `obj` (as A) with body `other` (as B) and their slip velocities.

    Call right after a step. `link_states` may pass a dict to share link queries between calls.
    """
    # the engine keeps manifold points up to its breaking distance after bodies part; only
    # points that carried load in this step are contacts
    raw = [c for c in world.contacts(obj, other) if c[9] > 0.0]
    if not raw:
        return _EMPTY
    on_obj = np.array([c[5] for c in raw])
    on_other = np.array([c[6] for c in raw])
    points = (on_obj + on_other) / 2
    normals = np.array([c[7] for c in raw])  # contactNormalOnB points from B into A, i.e. into the object
    fn = np.array([c[9] for c in raw])
    friction = np.array([np.multiply(c[10], c[11]) + np.multiply(c[12], c[13]) for c in raw])
    links = np.array([c[4] for c in raw], dtype=int)
    dt = world.settings.time_step
    com, _, v, w = world.link_state(obj, -1)
    # each body's material point is taken on its own surface, against its start-of-step com
    rel = point_velocity(com - v * dt, v, w, on_obj)
    states = {} if link_states is None else link_states
    for link in set(links.tolist()):
        if link not in states:
            states[link] = world.link_state(other, link)
        lcom, _, lv, lw = states[link]
        mask = links == link
        rel[mask] -= point_velocity(lcom - lv * dt, lv, lw, on_other[mask])
    slip = rel - np.sum(rel * normals, axis=1, keepdims=True) * normals
    return ContactSample(points, normals, fn, friction, slip, links, -np.array([c[8] for c in raw]))
