"""Named physical constants and tolerances, each with its unit and why it has its value."""

GRAVITY = 9.81  # m/s^2, standard gravity rounded as commonly used in bench work

# Unit factors from the units spec files may use (the field name says which) to SI.
UNIT_TO_SI = {
    "mm": 1e-3,
    "m": 1.0,
    "deg": 3.141592653589793 / 180.0,
    "g": 1e-3,
    "kg": 1.0,
    "rpm": 2.0 * 3.141592653589793 / 60.0,
}

# Meshes: how many segments approximate round things in generated convex parts.
# 48 keeps a ring's volume within 0.3 % of the ideal annulus (1 - sin(x)/x at x = pi/48).
ROUND_SEGMENTS = 48
# A mesh counts as convex when its volume is within this share of its hull's volume.
CONVEX_VOLUME_SHARE = 0.995
# Convex parts of a concave mesh: upper bound handed to the decomposition.
MAX_CONVEX_PARTS = 16

# Smallest thing we build: below 0.1 mm the solver's default collision margin dominates.
MIN_SIZE_M = 1e-4

# Plausibility of mass properties read from files (objects' and grippers' URDFs).
# Principal moments of any rigid body obey I1 + I2 >= I3 (each is an integral of r^2 - x_k^2 over
# the mass; standard rigid-body mechanics, recalled from memory). Files print rounded numbers, and a
# thin disc sits exactly on the bound, so a sum this share below I3 is still accepted.
INERTIA_TRIANGLE_TOL = 1e-3
# Radius of gyration k = sqrt(I / m) about an axis through the centre of mass. No material point lies
# farther from such an axis than the diagonal of the part's bounding box (the centre of mass lies
# inside the box), so k above the diagonal (plus this share for rounding) is impossible.
GYRATION_ABOVE_DIAGONAL = 0.02
# A largest k below this share of the part's largest size means nearly all of its mass sits in a
# tiny core: a rod has k = 0.29 L, a sphere 0.32 L; our own bound, far below any real lab part,
# which still catches placeholder values such as 1e-7 kg m^2 on a 100 g, 50 mm part (k = 0.02 L).
GYRATION_FLOOR = 0.05
# A centre of mass outside the collision geometry's bounding box by more than this share of the
# box's diagonal cannot belong to that geometry.
COM_OUTSIDE_BOX = 0.01

ENGINES = ("pybullet", "mujoco")  # physics engines a world can run on (harness/sim/engines.py)
