"""What the reference peers share: the device clock model and their socket plumbing.

The robot bridge (:mod:`echoreo.adapters.bridge_peer`) and the sensor publisher
(:mod:`echoreo.adapters.publisher_peer`) each listen on one ROUTER socket
(adapters/PROTOCOL.md section 1), write a ready file for scripts once
listening, stop on SIGTERM/SIGINT, and drain their socket before closing
(PROTOCOL.md section 4, "Closing"). :class:`DeviceClock` models a device's own
clock for both.
"""

from __future__ import annotations

import json
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import zmq

from echoreo.adapters.protocol import SOCKET_MAX_FRAME_BYTES
from echoreo.adapters.security import CurveKeys, secure_server
from echoreo.errors import InputError

__all__ = ["DeviceClock", "Stopper", "bind_endpoint", "boot_id", "drain_then_close",
           "listening", "peer_socket", "receive_pending", "write_ready_file"]


@dataclass(frozen=True)
class DeviceClock:
    """A device's own clock, modelled from the host's monotonic clock.

    .. math::

        T = s\\,(m - m_0) + J \\left\\lfloor \\frac{m - m_0}{P} \\right\\rfloor,
        \\qquad t_d = \\theta_d + (1 + \\delta)\\, T

    with the monotonic clock :math:`m` (ns, ``time.monotonic_ns``, shared by
    all processes of one Linux host), origin :math:`m_0`, time scale :math:`s`,
    and optional leaps of :math:`J` every :math:`P` of real time; :math:`T` is
    the simulated true time, :math:`\\delta` the drift and :math:`\\theta_d`
    the offset. A real device is ``DeviceClock()`` (:math:`s = 1`, no leaps,
    no offset). Leaps compress a long run into a short one while time between
    leaps runs at real speed, so message delays stay those of the real link
    (scaling them by :math:`s` would magnify every delay and asymmetry).

    Parameters
    ----------
    offset_s : float
        :math:`\\theta_d`, s (device time at the origin).
    drift_ppm : float
        :math:`\\delta \\times 10^6`.
    scale : float
        :math:`s`.
    origin_ns : int
        :math:`m_0`, ns of ``time.monotonic_ns()``.
    leap_s, leap_every_s : float
        :math:`J` and :math:`P`, s (no leaps when either is 0).
    """

    offset_s: float = 0.0
    drift_ppm: float = 0.0
    scale: float = 1.0
    origin_ns: int = 0
    leap_s: float = 0.0
    leap_every_s: float = 0.0

    def true_ns(self, m_ns: int | None = None) -> float:
        """Simulated true time :math:`T` (ns) at monotonic time ``m_ns`` (default now)."""
        m = (time.monotonic_ns() if m_ns is None else m_ns) - self.origin_ns
        t = self.scale * m
        if self.leap_s > 0 and self.leap_every_s > 0:
            t += self.leap_s * 1e9 * (m // round(self.leap_every_s * 1e9))
        return t

    def now_ns(self) -> int:
        """Device time now, ns."""
        return round(self.offset_s * 1e9 + (1.0 + self.drift_ppm * 1e-6) * self.true_ns())

    def real_s(self, device_span_ns: float) -> float:
        """Real seconds that pass (on average) while device time advances by ``device_span_ns``."""
        rate = self.scale
        if self.leap_s > 0 and self.leap_every_s > 0:
            rate += self.leap_s / self.leap_every_s
        return device_span_ns / (1e9 * rate * (1.0 + self.drift_ppm * 1e-6))


def boot_id() -> int:
    """A random 48-bit number identifying this run of a peer (``boot``, PROTOCOL.md section 2)."""
    return int.from_bytes(os.urandom(6), "little")


def write_ready_file(path: str | Path, info: dict[str, Any]) -> None:
    """Write ``info`` as JSON atomically (for scripts waiting for a peer to listen)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(info))
    tmp.replace(path)


def peer_socket(ctx: zmq.Context, keys: CurveKeys | None, *,
                sndhwm: int | None = None) -> tuple[zmq.Socket, Any]:
    """The ROUTER socket a reference peer listens on, with CURVE when keys are given.

    A non-zero linger also makes libzmq let a reader finish the messages of a
    peer that disconnects instead of cutting its pipe (a cut in the middle of a
    multipart message aborts libzmq 4.3.5 on an assertion, fq.cpp:80).

    Parameters
    ----------
    ctx : zmq.Context
        The peer's context.
    keys : CurveKeys or None
        CURVE keys (the socket becomes a CURVE server with a ZAP authenticator).
    sndhwm : int or None
        Send high-water mark, messages (libzmq's default when None).

    Returns
    -------
    sock : zmq.Socket
        The unbound ROUTER socket.
    auth : zmq.auth.thread.ThreadAuthenticator or None
        The running authenticator, to stop after closing (None without keys).
    """
    sock = ctx.socket(zmq.ROUTER)
    sock.linger = 1000
    sock.router_mandatory = True
    sock.maxmsgsize = SOCKET_MAX_FRAME_BYTES
    if sndhwm is not None:
        sock.sndhwm = sndhwm
    return sock, secure_server(sock, keys, ctx)


def bind_endpoint(sock: zmq.Socket, endpoint: str) -> str:
    """Bind ``sock`` to ``endpoint``; returns the endpoint bound (the real port for port 0).

    Raises
    ------
    InputError
        If the endpoint cannot be bound (port in use, bad address).
    """
    try:
        sock.bind(endpoint)
    except zmq.ZMQError as exc:
        raise InputError(f"cannot listen on {endpoint}: {exc}",
                         hint="choose a free port, e.g. tcp://127.0.0.1:0 for any") from exc
    return sock.getsockopt_string(zmq.LAST_ENDPOINT)


def drain_then_close(sock: zmq.Socket, grace_s: float = 0.2) -> None:
    """Read and discard what peers still send for ``grace_s``, then close with linger.

    Closing a TCP socket with unread input makes the kernel reset the
    connection, and the peer's kernel may then discard our last messages that
    it had not handed to ZeroMQ yet. Hosts stop sending for a second after our
    BYE; reading until then lets the connection end with an orderly FIN.
    """
    end = time.monotonic() + grace_s
    while (left := end - time.monotonic()) > 0:
        if sock.poll(left * 1e3):
            try:
                sock.recv_multipart(zmq.NOBLOCK)
            except zmq.ZMQError:
                pass
    sock.close(linger=1000)  # deliver what was sent (and logged) before leaving


@contextmanager
def listening(endpoint: str, keys: CurveKeys | None, *, ready_file: str | Path | None = None,
              ready_info: dict[str, Any] | None = None,
              on_ready: Callable[[str], None] | None = None,
              sndhwm: int | None = None) -> Iterator[tuple[zmq.Socket, str]]:
    """A reference peer's listening socket for the length of a ``with`` block.

    Binds (:func:`bind_endpoint`), then announces the bound endpoint: a ready file
    with ``endpoint``, ``pid`` and ``ready_info``, and ``on_ready(endpoint)``.
    Yields ``(socket, bound endpoint)``; on leaving, the socket is drained and
    closed (:func:`drain_then_close`), the CURVE authenticator stopped and the
    context ended, after whatever the block's own ``finally`` still sends.
    """
    ctx = zmq.Context()
    sock, auth = peer_socket(ctx, keys, sndhwm=sndhwm)
    try:
        bound = bind_endpoint(sock, endpoint)
        if ready_file:
            write_ready_file(ready_file, {"endpoint": bound, "pid": os.getpid(),
                                          **(ready_info or {})})
        if on_ready:
            on_ready(bound)
        yield sock, bound
    finally:
        drain_then_close(sock)
        if auth is not None:
            auth.stop()
        ctx.term()


def receive_pending(sock: zmq.Socket, handle: Callable[[list[bytes]], None],
                    most: int = 1000) -> None:
    """Hand every message already waiting on ``sock`` (at most ``most``) to ``handle``."""
    for _ in range(most):
        try:
            frames = sock.recv_multipart(zmq.NOBLOCK)
        except zmq.Again:
            return
        handle(frames)


class Stopper:
    """Stops a serve loop on SIGTERM/SIGINT (main thread only) or on request."""

    def __init__(self) -> None:
        self.event = threading.Event()
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGTERM, signal.SIGINT):
                signal.signal(sig, lambda *_: self.event.set())
