"""Exceptions of pitchwire_client.

Every exception the client raises on purpose derives from PitchwireError and carries a stable `code`: the
daemon's error code (docs/protocol.md, "error") for a refused request, or one of the client's own codes
below for a problem with the connection. Connection problems also derive from the built-in ConnectionError,
and timeouts from the built-in TimeoutError, so code that already handles those keeps working.

| exception           | code                     | when |
|---------------------|--------------------------|------|
| RequestError        | the daemon's code        | the daemon answered a request with `error` |
| ForbiddenError      | forbidden                | the connection's role does not allow the request |
| RateLimitedError    | rate_limited             | too many requests on this connection |
| DaemonUnreachable   | unreachable              | nothing answers at the address, or the handshake did not finish in time |
| HandshakeRefused    | handshake_refused        | the daemon answered the WebSocket handshake with an HTTP error |
| TokenRefused        | forbidden                | ... with 403 and a token was given: the token is not the daemon's |
| ConnectionLost      | connection_lost          | the connection closed (and was not, or could no longer be, reconnected) |
| RequestTimeout      | timeout                  | a request got no answer in time |
| BandTimeout         | band_timeout             | wait_until_in_band: the condition was not met in time |
"""

from __future__ import annotations

from typing import Optional

__all__ = [
    "PitchwireError", "RequestError", "ForbiddenError", "RateLimitedError", "PitchwireConnectionError",
    "DaemonUnreachable", "HandshakeRefused", "TokenRefused", "ConnectionLost", "RequestTimeout", "BandTimeout",
]


class PitchwireError(Exception):
    """Base of every error of this package. `code` is stable; `message` is one line for people."""

    code: str = "error"

    def __init__(self, message: str, *, code: Optional[str] = None) -> None:
        # Exception.__init__ with one argument: OSError-derived subclasses would read two as (errno, text).
        Exception.__init__(self, message)
        self.message = message
        if code is not None:
            self.code = code

    def __str__(self) -> str:
        return f"{self.code}: {self.message}"


class RequestError(PitchwireError):
    """The daemon answered a request with an `error` message.

    `code` is the daemon's error code, `message` its one-line explanation, `request` the request type
    (`mark`, `set_band`...) and `request_id` the id the client gave it.
    """

    def __init__(self, code: str, message: str, *, request: Optional[str] = None,
                 request_id: Optional[str] = None) -> None:
        super().__init__(message, code=code)
        self.request = request
        self.request_id = request_id

    def __str__(self) -> str:
        where = f" ({self.request} {self.request_id})" if self.request else ""
        return f"{self.code}{where}: {self.message}"


class ForbiddenError(PitchwireError):
    """The daemon refused for lack of a role: a request the connection's role does not allow (a `mark` without
    a lab or supervisor token, a `set_band` without the supervisor token), or a token it does not know."""

    code = "forbidden"


class RateLimitedError(PitchwireError):
    """The connection sent requests faster than the daemon allows (`requests_per_s`, `request_burst`)."""

    code = "rate_limited"


class RequestForbidden(RequestError, ForbiddenError):
    """A request refused with `forbidden`: catch ForbiddenError (or RequestError)."""


class RequestRateLimited(RequestError, RateLimitedError):
    """A request refused with `rate_limited`: catch RateLimitedError (or RequestError)."""


def request_error(code: str, message: str, *, request: Optional[str] = None,
                  request_id: Optional[str] = None) -> RequestError:
    """The exception for the daemon's error answer `code`."""
    cls = {"forbidden": RequestForbidden, "rate_limited": RequestRateLimited}.get(code, RequestError)
    return cls(code, message, request=request, request_id=request_id)


class PitchwireConnectionError(PitchwireError, ConnectionError):
    """Base of the connection problems; also a built-in ConnectionError. `url` is the address tried."""

    code = "connection"

    def __init__(self, message: str, *, url: Optional[str] = None, code: Optional[str] = None) -> None:
        super().__init__(message, code=code)
        self.url = url


class DaemonUnreachable(PitchwireConnectionError):
    """Nothing answers at the address (connection refused, no route), or the WebSocket handshake did not
    complete within the open timeout: pitchwired is not running there."""

    code = "unreachable"


class HandshakeRefused(PitchwireConnectionError):
    """The daemon answered the handshake with an HTTP error (`status`): a foreign Origin or Host, a missing
    subprotocol, too many clients."""

    code = "handshake_refused"

    def __init__(self, message: str, *, url: Optional[str] = None, status: Optional[int] = None,
                 code: Optional[str] = None) -> None:
        super().__init__(message, url=url, code=code)
        self.status = status


class TokenRefused(HandshakeRefused, ForbiddenError):
    """The daemon refused the token given (HTTP 403): it is not the lab or supervisor token of this daemon
    (tokens are made anew when the token folder is new). Also a ForbiddenError."""

    code = "forbidden"


class ConnectionLost(PitchwireConnectionError):
    """The connection closed. `close_code` is the WebSocket close code when one was received (1001: the daemon
    stopped; 1008: policy, such as a client too slow or too many refused requests), `close_reason` its text."""

    code = "connection_lost"

    def __init__(self, message: str, *, url: Optional[str] = None, close_code: Optional[int] = None,
                 close_reason: str = "") -> None:
        super().__init__(message, url=url)
        self.close_code = close_code
        self.close_reason = close_reason


class RequestTimeout(PitchwireError, TimeoutError):
    """A request got no answer within its timeout."""

    code = "timeout"


class BandTimeout(PitchwireError, TimeoutError):
    """wait_until_in_band() timed out. `longest_hold_s` is the longest stretch the voice did stay voiced and
    inside the band (audio clock), `frames` the frames examined, `inside_frames` those inside the band."""

    code = "band_timeout"

    def __init__(self, message: str, *, longest_hold_s: float = 0.0, frames: int = 0, inside_frames: int = 0) -> None:
        super().__init__(message)
        self.longest_hold_s = longest_hold_s
        self.frames = frames
        self.inside_frames = inside_frames
