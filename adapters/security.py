"""Where ZeroMQ links may go, and CURVE encryption and authentication for the rest.

Policy (PROTOCOL.md, "Security"): every link is loopback (``tcp://127.x.x.x``,
``tcp://[::1]``, ``tcp://localhost``) or ``ipc://`` unless CURVE keys are
configured. Binding or connecting anywhere else without keys is refused with
an :class:`~echoreo.errors.InputError` before any socket is touched, so the
check itself sends nothing anywhere. Host names other than ``localhost`` are
never resolved (resolution is traffic); they count as non-loopback.

With keys, the server side (robot bridge, sensor publisher) runs a ZAP
authenticator (:class:`zmq.auth.thread.ThreadAuthenticator`) that admits only
the client public keys found in its ``authorized/`` folder; CURVE (RFC 26 of
the ZeroMQ project, CurveZMQ) then encrypts and authenticates the link.

Key folder layout written by :func:`generate_keys` (``echoreo keys FOLDER``)::

    FOLDER/server.key            server public key   (copy to every client)
    FOLDER/server.key_secret     server secret key   (stays on the server)
    FOLDER/<client>.key          client public key
    FOLDER/<client>.key_secret   client secret key   (stays on the client)
    FOLDER/authorized/<client>.key   public keys the server admits
"""

from __future__ import annotations

import ipaddress
import shutil
from dataclasses import dataclass
from pathlib import Path

import zmq
import zmq.auth
from zmq.auth.thread import ThreadAuthenticator

from echoreo.errors import InputError

__all__ = ["CurveKeys", "check_endpoint", "generate_keys", "is_loopback_endpoint",
           "secure_client", "secure_server"]

_HINT = ("use tcp://127.0.0.1:PORT for a peer on this computer, or generate keys with "
         "`echoreo keys FOLDER` and pass them (--keys FOLDER; `keys:` in the session plan) "
         "on both sides")


def _host_port(endpoint: str) -> tuple[str, str]:
    rest = endpoint[len("tcp://"):]
    if rest.startswith("["):
        host, _, port = rest[1:].partition("]")
        return host, port.lstrip(":")
    host, _, port = rest.rpartition(":")
    return host, port


def is_loopback_endpoint(endpoint: str) -> bool:
    """True for ``ipc://`` and ``tcp://`` endpoints on a loopback address.

    Parameters
    ----------
    endpoint : str
        A ZeroMQ endpoint, e.g. ``"tcp://127.0.0.1:47100"``.

    Returns
    -------
    bool
        ``True`` for ``ipc://...``, ``inproc://...`` and ``tcp://`` with a host in
        127.0.0.0/8, ``::1`` or the literal ``localhost``; ``False`` for anything
        else, including wildcards (``*``, ``0.0.0.0``), interface names and host
        names, which are never resolved.
    """
    if endpoint.startswith(("ipc://", "inproc://")):
        return True
    if not endpoint.startswith("tcp://"):
        return False
    host, _ = _host_port(endpoint)
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


@dataclass(frozen=True)
class CurveKeys:
    """A key folder written by :func:`generate_keys`, seen from one side of a link.

    Parameters
    ----------
    folder : str or Path
        The key folder.
    client : str
        Which client key pair this side uses when it connects (default ``client``).
    """

    folder: Path
    client: str = "client"

    def __post_init__(self) -> None:
        object.__setattr__(self, "folder", Path(self.folder))

    def _load(self, name: str, secret: bool) -> tuple[bytes, bytes | None]:
        path = self.folder / (f"{name}.key_secret" if secret else f"{name}.key")
        if not path.is_file():
            raise InputError(f"CURVE key file {path} does not exist",
                             hint="generate keys with `echoreo keys FOLDER` and copy the "
                                  "public files as described in adapters/PROTOCOL.md")
        try:
            return zmq.auth.load_certificate(path)
        except (OSError, ValueError) as exc:
            raise InputError(f"CURVE key file {path} cannot be read: {exc}",
                             hint="regenerate it with `echoreo keys FOLDER`") from exc

    def server_pair(self) -> tuple[bytes, bytes]:
        """(public, secret) of the server."""
        public, secret = self._load("server", True)
        assert secret is not None
        return public, secret

    def server_public(self) -> bytes:
        """Public key of the server (all a client needs of it)."""
        return self._load("server", False)[0]

    def client_pair(self) -> tuple[bytes, bytes]:
        """(public, secret) of this side's client identity."""
        public, secret = self._load(self.client, True)
        assert secret is not None
        return public, secret

    @property
    def authorized(self) -> Path:
        """Folder of client public keys a server admits."""
        return self.folder / "authorized"


def check_endpoint(endpoint: str, keys: CurveKeys | None, action: str) -> None:
    """Refuse a non-loopback endpoint unless CURVE keys are configured.

    Parameters
    ----------
    endpoint : str
        ZeroMQ endpoint.
    keys : CurveKeys or None
        Configured keys.
    action : str
        ``"bind"`` or ``"connect"`` (for the message).

    Raises
    ------
    InputError
        For a malformed endpoint, or a non-loopback one without keys.
    """
    if not isinstance(endpoint, str) or not endpoint.startswith(("tcp://", "ipc://")):
        raise InputError(f"ZeroMQ endpoint {endpoint!r} is not tcp://HOST:PORT or ipc://PATH",
                         hint="for example tcp://127.0.0.1:47100")
    if endpoint.startswith("tcp://"):
        host, port = _host_port(endpoint)
        if not host or not (port == "*" or port.isdigit()):
            raise InputError(f"ZeroMQ endpoint {endpoint!r} lacks a host or a port",
                             hint="for example tcp://127.0.0.1:47100")
    if keys is None and not is_loopback_endpoint(endpoint):
        raise InputError(
            f"refusing to {action} {endpoint}: it is not a loopback address and no CURVE keys "
            "are configured, so the link would be unencrypted and unauthenticated on a network",
            hint=_HINT)


def secure_server(sock: zmq.Socket, keys: CurveKeys | None,
                  ctx: zmq.Context) -> ThreadAuthenticator | None:
    """Make ``sock`` a CURVE server admitting only authorized client keys.

    Returns the running authenticator (stop it when done), or ``None`` without keys.
    """
    if keys is None:
        return None
    public, secret = keys.server_pair()
    if not keys.authorized.is_dir():
        raise InputError(f"CURVE key folder {keys.folder} has no authorized/ folder",
                         hint="put the public keys of admitted clients in FOLDER/authorized/")
    auth = ThreadAuthenticator(ctx)
    auth.start()
    auth.configure_curve(domain="*", location=str(keys.authorized))
    sock.curve_secretkey = secret
    sock.curve_publickey = public
    sock.curve_server = True
    return auth


def secure_client(sock: zmq.Socket, keys: CurveKeys | None) -> None:
    """Make ``sock`` a CURVE client of the server in ``keys`` (no-op without keys)."""
    if keys is None:
        return
    public, secret = keys.client_pair()
    sock.curve_serverkey = keys.server_public()
    sock.curve_publickey = public
    sock.curve_secretkey = secret


def generate_keys(folder: str | Path, clients: tuple[str, ...] = ("client",),
                  overwrite: bool = False) -> list[Path]:
    """Write a server key pair and client key pairs, authorizing the clients.

    Parameters
    ----------
    folder : str or Path
        Target folder (created).
    clients : tuple of str
        Client names; each gets ``<name>.key``/``.key_secret`` and a copy of its
        public key in ``authorized/``.
    overwrite : bool
        Replace existing key files; otherwise existing ones are an error.

    Returns
    -------
    list of Path
        Files written.

    Raises
    ------
    InputError
        If keys exist already and ``overwrite`` is false, or a name is unsafe.
    """
    folder = Path(folder)
    names = ("server", *clients)
    for name in names:
        if not name.replace("_", "").replace("-", "").isalnum():
            raise InputError(f"key name {name!r} must be letters, digits, '-' or '_'")
        if not overwrite and (folder / f"{name}.key_secret").exists():
            raise InputError(f"{folder / (name + '.key_secret')} exists already",
                             hint="choose another folder or pass --overwrite")
    if "server" in clients:
        raise InputError("a client cannot be called 'server'")
    (folder / "authorized").mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    for name in names:
        public, secret = zmq.auth.create_certificates(folder, name)
        Path(secret).chmod(0o600)
        written += [Path(public), Path(secret)]
        if name != "server":
            dst = folder / "authorized" / f"{name}.key"
            shutil.copyfile(public, dst)
            written.append(dst)
    return written
