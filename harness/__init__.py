"""grasp-harness: physics-based grasp and slip trials for grippers with driven fingertip rollers.

Heavy modules (pybullet, trimesh, pandas) are imported by the functions that need them, so
importing `harness` and printing the CLI's help stay fast.
"""

__version__ = "0.1.0"

__all__ = ["__version__", "load_spec"]


def load_spec(path):
    """Load and validate a gripper spec or an object set (raises harness.errors.SpecError)."""
    from .specs import load_any
    return load_any(path)
