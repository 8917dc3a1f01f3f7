"""Which physics engine a world runs on: `open_world(settings)` by `settings.engine`."""

from __future__ import annotations

from ..errors import HarnessError
from .world import ENGINES, PhysicsSettings, World

__all__ = ["open_world", "engine_available", "engine_version", "ENGINES"]


def open_world(settings: PhysicsSettings = PhysicsSettings()) -> World:
    if settings.engine == "pybullet":
        from .bullet_world import BulletWorld
        return BulletWorld(settings)
    if settings.engine == "mujoco":
        if not engine_available("mujoco"):
            raise HarnessError("engine 'mujoco' needs the optional extra: pip install -e '.[mujoco]'")
        from .mujoco_world import MujocoWorld
        return MujocoWorld(settings)
    raise HarnessError(f"unknown physics engine {settings.engine!r}; allowed: {', '.join(ENGINES)}")


def engine_version(engine):
    """"name version" of an engine's installed package, for the run record."""
    from importlib import metadata
    try:
        return f"{engine} {metadata.version(engine)}"
    except metadata.PackageNotFoundError:
        return f"{engine} (not installed)"


def engine_available(engine):
    """Whether `engine` can be imported here (MuJoCo is an optional extra)."""
    import importlib.util
    return engine in ENGINES and importlib.util.find_spec(engine) is not None
