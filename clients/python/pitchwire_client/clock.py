"""The offset between the daemon's audio clock and the client's clock, from ping/pong round trips.

The daemon answers `ping` with `pong.time_s`, its audio clock when it answered (docs/protocol.md). That
instant lies between the client sending the ping (t_send) and reading the pong (t_recv), both on the
client's clock, so one round trip gives offset = local - audio = (t_send + t_recv) / 2 - time_s, within half
the round trip either way: the round-trip midpoint (Cristian 1989; the offset of NTP, RFC 5905, with a
symmetric path; both memory).

One more delay matters. The daemon's audio clock counts the samples its analysis has taken in, and these come
in blocks (one device callback, or one block of a replayed file or of the demo voice: 16 ms for the demo at
16 kHz), so time_s moves in steps and lags the newest input by up to a block. We define the relation between
the clocks at the steps: the local time at which the count reached time_s. Then every round trip k bounds it
from above, offset <= t_recv_k - time_s_k (the count had reached time_s_k when the daemon answered), and every
pair of round trips j, k that saw the count move (time_s_j < time_s_k) bounds it from below,
offset > t_send_j - time_s_k (the count reached time_s_k after the daemon answered j). The estimate is the
middle of the tightest such interval, and its uncertainty half the interval's width: a few milliseconds
with pings a few milliseconds apart (ClockEstimator needs pings closer together than a block, and a burst
that spans at least one step). A block that the daemon took in late (a busy machine) moves its step late
and can put its lower bound above the upper one; such bounds are left out (upper bounds hold whatever the
lateness). When no pair saw a step, the estimate falls back to the midpoint of the round trip with the
smallest upper bound (the least lagging: the lag only makes time_s smaller) with half its round trip as the
uncertainty, and says so with `bounded` False.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import List, Optional, Tuple

__all__ = ["ClockOffset", "ClockEstimator"]


@dataclass(frozen=True)
class ClockOffset:
    """local clock = audio clock + `offset_s`, within +-`uncertainty_s`.

    `bounded`: the interval comes from steps of the audio clock seen between pings (see the module's text);
    False when it is only the best round trip's midpoint (then the audio clock's block lag, up to a block, is
    not in `uncertainty_s`). `rtt_s`: the smallest round trip; `spread_s`: the range of the single round
    trips' midpoint offsets (about one audio block when the pings were spread over several); `samples`:
    round trips used; `measured_at`: local clock of the newest of them.
    """

    offset_s: float
    uncertainty_s: float
    bounded: bool
    rtt_s: float
    spread_s: float
    samples: int
    measured_at: float

    def wall_time(self, time_s: float) -> float:
        """The client's clock at audio time `time_s`."""
        return time_s + self.offset_s

    def audio_time(self, wall: float) -> float:
        """The audio time at client clock `wall`."""
        return wall - self.offset_s


class ClockEstimator:
    """Keeps the round trips of the last `max_age_s` seconds and estimates from them. Old ones are let go
    because the two clocks drift apart slowly: a sound card's sample clock is not the computer's."""

    def __init__(self, max_age_s: float = 60.0) -> None:
        self.max_age_s = max_age_s
        self._samples: List[Tuple[float, float, float]] = []  # (t_send, t_recv, audio time_s)

    def clear(self) -> None:
        self._samples = []

    def add(self, t_send: float, t_recv: float, audio_s: float) -> None:
        # A new list each time, never changed in place: BlockingClient reads it from another thread.
        self._samples = [s for s in self._samples if t_recv - s[1] <= self.max_age_s] + [(t_send, t_recv, audio_s)]

    def estimate(self) -> Optional[ClockOffset]:
        samples = self._samples
        if not samples:
            return None
        mids = [(s[0] + s[1]) / 2 - s[2] for s in samples]
        best = min(samples, key=lambda s: s[1] - s[2])
        upper = best[1] - best[2]
        rtt = min(s[1] - s[0] for s in samples)
        lowers = []
        for k in samples:
            # The latest ping that still saw a smaller count bounds the step to k's count from below.
            before = [j[0] for j in samples if j[2] < k[2] and j[0] <= k[0]]
            if before:
                lowers.append(max(before) - k[2])
        # A block the daemon took in late (a busy machine) makes its step late and its lower bound too high,
        # above the upper bound: such bounds are left out. Upper bounds hold whatever the lateness.
        lowers = [b for b in lowers if b < upper]
        lower = max(lowers) if lowers else None
        common = dict(rtt_s=rtt, spread_s=max(mids) - min(mids), samples=len(samples),
                      measured_at=max(s[1] for s in samples))
        if lower is not None:
            return ClockOffset(offset_s=(lower + upper) / 2, uncertainty_s=(upper - lower) / 2, bounded=True, **common)
        return ClockOffset(offset_s=(best[0] + best[1]) / 2 - best[2], uncertainty_s=(best[1] - best[0]) / 2,
                           bounded=False, **common)
