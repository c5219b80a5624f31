"""The one error shape for a bad line in any JSON Lines input we read."""

from __future__ import annotations


class LineError(ValueError):
    """A line of an input file breaks its format; the message names file and line."""

    def __init__(self, source: str, line_number: int, problem: str) -> None:
        super().__init__(f"{source}:{line_number}: {problem}")
        self.line_number = line_number
