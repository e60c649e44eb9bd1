"""A controllable epoch clock, for the code that takes ``clock=`` (notifier, health log)."""

from __future__ import annotations


class Clock:
    """A controllable epoch clock."""

    def __init__(self, start_s: float) -> None:
        self.now_s = start_s

    def __call__(self) -> float:
        return self.now_s

    def advance(self, seconds: float) -> float:
        self.now_s += seconds
        return self.now_s
