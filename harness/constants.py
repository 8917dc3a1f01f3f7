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
