"""A timed run's figures, shared by the in-process and the service runs."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Measured:
    """Occurrences with the wall-clock and CPU seconds (all threads, all processes of
    the run) spent on them; CPU time hardly moves with the host's load."""

    occurrences: int
    seconds: float
    cpu_seconds: float

    @property
    def per_second(self) -> float:
        return self.occurrences / self.seconds if self.seconds > 0 else 0.0

    @property
    def per_cpu_second(self) -> float:
        return self.occurrences / self.cpu_seconds if self.cpu_seconds > 0 else 0.0
