"""The progress callback of a build: stage, fraction, timings, and the stage boundaries
where a build can be stopped (cancel, shutdown, a lost lease)."""

from __future__ import annotations

import time
from collections.abc import Callable


class StageClock:
    """The progress callback handed to the geometry: remembers the stage and fraction
    (the heartbeat reports them), times each stage, and at every stage change calls
    ``at_boundary(next_stage)``, which may raise to stop the build there."""

    def __init__(
        self,
        at_boundary: Callable[[str], None] | None = None,
        clock: Callable[[], float] = time.perf_counter,
    ) -> None:
        self._at_boundary = at_boundary
        self._clock = clock
        self._timings: dict[str, float] = {}
        self._stage: str | None = None
        self._since = clock()
        self.fraction = 0.0

    @property
    def stage(self) -> str | None:
        return self._stage

    def __call__(self, stage: str, fraction: float) -> None:
        if stage != self._stage:
            self._close()
            if self._at_boundary is not None:
                self._at_boundary(stage)
            self._stage = stage
        self.fraction = min(1.0, max(0.0, float(fraction)))

    def _close(self) -> None:
        now = self._clock()
        if self._stage is not None:
            self._timings[self._stage] = self._timings.get(self._stage, 0.0) + now - self._since
        self._since = now

    def finish(self) -> None:
        """End the current stage without a boundary check (after the publication)."""
        self._close()
        self._stage = None

    def timings(self) -> dict[str, float]:
        """Seconds per stage so far, the running stage included."""
        out = dict(self._timings)
        if self._stage is not None:
            out[self._stage] = out.get(self._stage, 0.0) + self._clock() - self._since
        return {k: round(v, 3) for k, v in out.items()}
