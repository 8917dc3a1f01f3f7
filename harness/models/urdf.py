"""Writing URDF text. Numbers are printed with a fixed format so the same model gives the same bytes."""

from __future__ import annotations

import numpy as np

__all__ = ["num", "vec", "inertial", "geometry", "link", "joint", "robot", "safe_name"]


def num(x):
    """A float printed with 10 significant digits, never in a locale-dependent way."""
    text = f"{float(x):.10g}"
    return "0" if text == "-0" else text


def vec(values):
    return " ".join(num(x) for x in values)


def inertial(mass, com, inertia):
    """<inertial> for `mass` kg at `com` (3,) m with `inertia` (3, 3) about the COM."""
    i = np.asarray(inertia, dtype=float)
    if not (mass > 0 and np.all(np.isfinite(i)) and np.all(np.linalg.eigvalsh(i) > 0)):
        raise ValueError(f"inertial needs a positive mass and a positive-definite inertia; got {mass}, {i}")
    return (f'    <inertial>\n      <origin xyz="{vec(com)}" rpy="0 0 0"/>\n      <mass value="{num(mass)}"/>\n'
            f'      <inertia ixx="{num(i[0, 0])}" ixy="{num(i[0, 1])}" ixz="{num(i[0, 2])}" '
            f'iyy="{num(i[1, 1])}" iyz="{num(i[1, 2])}" izz="{num(i[2, 2])}"/>\n    </inertial>\n')


def geometry(shape, dims=None, filename=None):
    """The <geometry> body: box (x, y, z), cylinder (radius, length), sphere (radius), or a mesh file."""
    if shape == "box":
        return f'<box size="{vec(dims)}"/>'
    if shape == "cylinder":
        return f'<cylinder radius="{num(dims[0])}" length="{num(dims[1])}"/>'
    if shape == "sphere":
        return f'<sphere radius="{num(dims[0])}"/>'
    if shape == "mesh":
        return f'<mesh filename="{filename}"/>'
    raise ValueError(f"unknown shape {shape!r}")


def link(name, mass, com, inertia, shapes, collide=True, rgba=(0.6, 0.6, 0.65, 1.0)):
    """A link with one visual (and, if `collide`, one collision) per shape.

    shapes: [(geometry text, xyz (3,), rpy (3,))].
    """
    body = [f'  <link name="{name}">\n', inertial(mass, com, inertia)]
    for geom, xyz, rpy in shapes:
        origin = f'<origin xyz="{vec(xyz)}" rpy="{vec(rpy)}"/>'
        body.append(f'    <visual>\n      {origin}\n      <geometry>{geom}</geometry>\n'
                    f'      <material name="{name}_colour"><color rgba="{vec(rgba)}"/></material>\n    </visual>\n')
        if collide:
            body.append(f'    <collision>\n      {origin}\n      <geometry>{geom}</geometry>\n    </collision>\n')
    body.append("  </link>\n")
    return "".join(body)


def joint(name, kind, parent, child, xyz=(0, 0, 0), rpy=(0, 0, 0), axis=(0, 0, 1),
          lower=None, upper=None, effort=None, velocity=None):
    """A joint; `lower`/`upper` in rad or m, `effort` in N m or N, `velocity` in rad/s or m/s."""
    text = [f'  <joint name="{name}" type="{kind}">\n', f'    <parent link="{parent}"/>\n',
            f'    <child link="{child}"/>\n', f'    <origin xyz="{vec(xyz)}" rpy="{vec(rpy)}"/>\n']
    if kind != "fixed":
        text.append(f'    <axis xyz="{vec(axis)}"/>\n')
        limits = []
        if lower is not None:
            limits += [f'lower="{num(lower)}"', f'upper="{num(upper)}"']
        limits += [f'effort="{num(effort)}"', f'velocity="{num(velocity)}"']
        text.append(f'    <limit {" ".join(limits)}/>\n')
    text.append("  </joint>\n")
    return "".join(text)


def safe_name(name):
    """`name` reduced to characters safe in an XML attribute and in a file name."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


def robot(name, parts):
    """The whole document, named `safe_name(name)`."""
    return f'<?xml version="1.0"?>\n<robot name="{safe_name(name)}">\n' + "".join(parts) + "</robot>\n"
