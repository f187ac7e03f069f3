"""Exceptions raised by the engine. The service maps them to 422 problem+json answers."""


class EngineError(Exception):
    """Base class of all errors the engine raises on purpose."""


class EpochSetFormatError(EngineError):
    """An uploaded epoch-set file is malformed.

    ``field`` names the offending field (e.g. ``"data"``, ``"labels"``); ``fix`` tells
    the user how to correct it.
    """

    def __init__(self, field: str, problem: str, fix: str) -> None:
        super().__init__(f"{field}: {problem}. {fix}")
        self.field = field
        self.problem = problem
        self.fix = fix


class EpochSetTooLargeError(EngineError):
    """An epoch-set file declares arrays larger than the configured memory limit."""

    def __init__(self, declared_bytes: int, limit_bytes: int) -> None:
        super().__init__(
            f"the arrays in this file would take {declared_bytes} bytes in memory, "
            f"more than the limit of {limit_bytes} bytes"
        )
        self.declared_bytes = declared_bytes
        self.limit_bytes = limit_bytes


class SpecError(EngineError):
    """A pipeline or scoring spec cannot be applied to a given epoch set.

    ``loc`` is the path to the offending field inside the spec, e.g.
    ``("pipelines", 0, "steps", 1, "cutoff_hz")``.
    """

    def __init__(self, loc: tuple[str | int, ...], message: str) -> None:
        super().__init__(message)
        self.loc = loc
        self.message = message

    def prefixed(self, *prefix: str | int) -> "SpecError":
        """Return the same error located under ``prefix``."""
        return SpecError(tuple(prefix) + self.loc, self.message)
