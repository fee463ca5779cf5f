"""After the runs: stopping rules on stored traces (selection), explicit baselines,
published references, tuning and ranking with their statistics."""
