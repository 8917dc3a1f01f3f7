"""grasp-harness: physics-based grasp and slip trials for grippers with driven fingertip rollers.

Heavy modules (pybullet, trimesh, pandas) are imported by the functions that need them, so
importing `harness` and printing the CLI's help stay fast.
"""

__version__ = "0.1.0"

__all__ = ["__version__", "load_spec", "load_run"]


def load_spec(path):
    """Load and validate a gripper spec or an object set (raises harness.errors.SpecError)."""
    from .specs import load_any
    return load_any(path)


def load_run(path):
    """One row per finished trial of a run folder as a typed pandas DataFrame (see harness.runs)."""
    from .runs import load_run as load
    return load(path)
