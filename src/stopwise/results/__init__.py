"""Everything on disk under a results root: layout and atomic writes (store), the trace
schema, the pandas readers (query) and the integrity check (verify)."""
