"""pitchwire_client: a Python client of pitchwired, the live pitch (F0) daemon, for stimulus and lab software.

- Client: asyncio (`async with Client(7350, token=...) as c`), frames()/stats()/events()/messages(),
  mark(), set_band(), wait_until_in_band(), wall_time()/audio_time(); read_token() for the lab token.
- BlockingClient: the same for programs without asyncio, on a thread of its own with a bounded queue.
- The messages (Frame, Settled, Stats, Event, Marker, Reconnected) and the exceptions (PitchwireError and
  its subclasses) are documented in their modules; the protocol in docs/protocol.md of the repository.

Only the Python standard library and websockets (Debian 12: python3-websockets 10.4) are needed.
"""

from .band import BandHold
from .blocking import BlockingClient
from .client import DEFAULT_PORT, SUBPROTOCOL, Client, resolve_url
from .clock import ClockOffset
from .errors import (BandTimeout, ConnectionLost, DaemonUnreachable, ForbiddenError, HandshakeRefused,
                     PitchwireConnectionError, PitchwireError, RateLimitedError, RequestError, RequestTimeout,
                     TokenRefused)
from .messages import Band, BandStats, Event, Frame, Hello, Marker, Message, Reconnected, Settled, Stats
from .tokens import default_token_dir, read_token

__version__ = "0.1.0"

__all__ = [
    "Client", "BlockingClient", "resolve_url", "read_token", "default_token_dir", "DEFAULT_PORT", "SUBPROTOCOL",
    "Frame", "Settled", "Stats", "BandStats", "Event", "Marker", "Reconnected", "Hello", "Band", "Message",
    "BandHold", "ClockOffset",
    "PitchwireError", "RequestError", "ForbiddenError", "RateLimitedError", "PitchwireConnectionError",
    "DaemonUnreachable", "HandshakeRefused", "TokenRefused", "ConnectionLost", "RequestTimeout", "BandTimeout",
]
