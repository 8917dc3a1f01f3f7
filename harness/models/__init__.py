"""Stage 1: spec files and their fields, gripper families and object kinds, mass properties, URDF text."""
