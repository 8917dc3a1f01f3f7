"""Stage 2: one trial in the engine: world, contacts, hand, phases, routines, metrics."""
