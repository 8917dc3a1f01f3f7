"""Stage 5: what a person looks at: the HTML report, replays, per-trial plots."""
