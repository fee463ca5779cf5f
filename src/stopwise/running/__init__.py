"""One run: the solver loop (runner), the Recorder and its metric sets, the evaluation paths
and compiled kernels, and recomputation of stored runs (rerun)."""
