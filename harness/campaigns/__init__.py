"""Stage 3: campaign files, paired expansion, workers, the run journal and run folders."""
