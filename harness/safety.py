"""The caution every command, help text and report carries (see README, Safety)."""

SAFETY = ("Simulated success is no guarantee for hardware: rollers and pinch points can trap fingers and "
          "loose clothing. Validate on hardware with reduced force and speed limits and follow local "
          "machine-safety rules and the robot maker's instructions.")
