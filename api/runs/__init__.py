"""Review runs on the store: read the events, run the review core, keep the run and its flags."""
