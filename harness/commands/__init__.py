"""Stage 6: the argparse wiring and bodies of the `grasp-harness` commands."""
