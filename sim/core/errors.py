"""The small error hierarchy. The CLI turns every `WheelbenchError` into one line and exit code 2."""


class WheelbenchError(Exception):
    """Base of every error Wheelbench raises on purpose."""


class InputError(WheelbenchError, ValueError):
    """Bad user input: a file, a key or an option. The message names where."""


class ScenarioError(InputError):
    """A scenario file (or an override of it) is malformed or out of range."""


class StrategyError(WheelbenchError, RuntimeError):
    """A strategy cannot be built or misbehaves (raised by strategy code, caught by the runner)."""
