"""grasp-harness: physics-based grasp and slip trials for grippers with driven fingertip rollers.

Heavy modules (pybullet, trimesh, pandas) are imported by the functions that need them, so
importing `harness` and printing the CLI's help stay fast.
"""

__version__ = "0.1.0"

__all__ = ["__version__", "load_spec", "load_run", "run_trial"]


def load_spec(path):
    """Load and validate a gripper spec or an object set (raises harness.errors.SpecError)."""
    from .models.specs import load_any
    return load_any(path)


def load_run(path):
    """One row per finished trial of a run folder as a typed pandas DataFrame (see harness.campaigns.runs)."""
    from .campaigns.runs import load_run as load
    return load(path)


def run_trial(*args, **kwargs):
    """One trial's flat row (dict); see harness.sim.trial.run_trial for the arguments."""
    from .sim.trial import run_trial as run
    return run(*args, **kwargs)
