"""Stopping rules as pure functions of a stored trace (rules), and the residual statistics
some of them read (residual)."""
