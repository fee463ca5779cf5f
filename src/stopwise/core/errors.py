"""Error types. Every bad-input error's ``str`` is one line naming the problem and the valid choices."""


class SpecError(ValueError):
    """Invalid configuration or input."""
