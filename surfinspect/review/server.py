"""Serving the review station with uvicorn, on loopback unless told otherwise."""

from __future__ import annotations

import ipaddress

from .app import ReviewConfig, create_app

__all__ = ["serve", "is_loopback"]

#: Uvicorn's own limits: few connections, short keep-alive (a station serves a handful of people).
LIMIT_CONCURRENCY = 32
TIMEOUT_KEEP_ALIVE_S = 5


def is_loopback(host: str) -> bool:
    """True for 127.0.0.0/8, ::1 and ``localhost``."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def serve(config: ReviewConfig, host: str, port: int) -> None:
    """Run the server until interrupted (Ctrl-C); ``config`` may also be an application already made."""
    import uvicorn

    uvicorn.run(
        create_app(config) if isinstance(config, ReviewConfig) else config,
        host=host,
        port=port,
        log_level="warning",
        access_log=False,  # request lines would carry nothing secret, but keep the terminal quiet
        server_header=False,
        limit_concurrency=LIMIT_CONCURRENCY,
        timeout_keep_alive=TIMEOUT_KEEP_ALIVE_S,
    )
