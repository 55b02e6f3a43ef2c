"""read_token(): the lab or supervisor token from the daemon's token folder.

pitchwired keeps its tokens in `token_dir` (docs/configuration.md): by default the state folder,
$XDG_STATE_HOME/pitchwire, that is ~/.local/state/pitchwire, as `lab.token` and `supervisor.token` (mode
0600, made on first start). A program run by the same user as the daemon can read them there.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Optional, Union

__all__ = ["read_token", "default_token_dir"]


def default_token_dir() -> Path:
    state = os.environ.get("XDG_STATE_HOME") or str(Path.home() / ".local" / "state")
    return Path(state) / "pitchwire"


def read_token(role: str = "lab", token_dir: Optional[Union[str, Path]] = None) -> str:
    """The token of `role` ("lab" or "supervisor") from `token_dir` (default: the daemon's default folder).
    Raises FileNotFoundError naming the file when it is not there (the daemon has not run yet as this user,
    or its configuration names another token_dir)."""
    if role not in ("lab", "supervisor"):
        raise ValueError(f"role: {role!r}; tokens exist for 'lab' and 'supervisor'")
    path = Path(token_dir) if token_dir is not None else default_token_dir()
    path = path / f"{role}.token"
    try:
        return path.read_text(encoding="utf-8").strip()
    except FileNotFoundError:
        raise FileNotFoundError(f"no {role} token at {path}: start pitchwired once as this user, or give the "
                                "token_dir of its configuration") from None
