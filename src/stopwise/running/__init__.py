"""One run: the solver loop (runner), the Recorder and its metric sets, the evaluation paths
and compiled kernels, and recomputation of stored runs (rerun)."""
from stopwise.running import sparsity  # noqa: E402,F401  (registers the built-in metric set: nnz / support columns)
