"""The "voice held inside a band" condition of wait_until_in_band(), fed one live frame at a time.

The condition is met at the first live frame at which the voice has been voiced and inside [low_hz, high_hz]
(limits inclusive, as the daemon counts time inside a band) in every frame since a frame at least `hold_s`
earlier on the audio clock: frame.time_s - since_s >= hold_s, where since_s is the time of the first frame of
the unbroken stretch. A frame unvoiced or outside, a missing frame (an index gap larger than the
subscription's decimation: a drop, or a reconnection) and a reconnection all break the stretch. Settled
frames are not used: the condition follows the live value, as a stimulus program would.
"""

from __future__ import annotations

import statistics
from dataclasses import dataclass
from typing import Callable, List, Optional, Tuple

from .messages import Frame

__all__ = ["BandHold", "HoldTracker"]


@dataclass(frozen=True)
class BandHold:
    """The condition was met: at `time_s` on the audio clock (the frame that completed the hold), for a
    stretch that started at `since_s`; `low_hz`/`high_hz` the limits then; `frame` the completing frame;
    `received` the client clock when it was read; `median_f0_hz` the median live F0 of the stretch (the pitch
    the voice held)."""

    time_s: float
    since_s: float
    low_hz: float
    high_hz: float
    frame: Frame
    received: float
    median_f0_hz: float


class HoldTracker:
    """`limits()` gives the band's (low_hz, high_hz) for each frame (a named band may change), or None when
    the band is gone; `every` is the subscription's decimation (index step between consecutive frames)."""

    def __init__(self, limits: Callable[[], Optional[Tuple[float, float]]], hold_s: float, every: int = 1) -> None:
        if hold_s < 0:
            raise ValueError("hold_s must not be negative")
        self.limits, self.hold_s, self.every = limits, hold_s, max(1, every)
        self.since_s: Optional[float] = None
        self.stretch: List[float] = []  # the live F0 of the frames since since_s
        self.last_index: Optional[int] = None
        self.longest_s = 0.0
        self.frames = 0
        self.inside_frames = 0

    def gap(self) -> None:
        """Frames are missing (a reconnection): the stretch breaks."""
        self.since_s, self.last_index = None, None

    def feed(self, frame: Frame) -> Optional[BandHold]:
        self.frames += 1
        if self.last_index is not None and frame.index - self.last_index > self.every:
            self.since_s = None  # frames missing: we cannot know the voice stayed inside
        self.last_index = frame.index
        lim = self.limits()
        if lim is None or frame.f0_hz is None or not (lim[0] <= frame.f0_hz <= lim[1]):
            self.since_s = None
            return None
        self.inside_frames += 1
        if self.since_s is None:
            self.since_s, self.stretch = frame.time_s, []
        self.stretch.append(frame.f0_hz)
        held = frame.time_s - self.since_s
        self.longest_s = max(self.longest_s, held)
        # 1e-9: time_s has 6 decimals; a hold of exactly n hops must count as reached.
        if held >= self.hold_s - 1e-9:
            return BandHold(frame.time_s, self.since_s, lim[0], lim[1], frame, frame.received,
                            statistics.median(self.stretch))
        return None
