"""CURVE keys: ``eddyvigil keys DIR``, loading key files, and the monitor's gatekeeper.

CURVE is ZeroMQ's own encryption and authentication (DESIGN §7, §12). The monitor is always
the CURVE *server*, whichever side binds; a publisher is a CURVE *client* that must know the
monitor's public key and hold a key pair whose public half the monitor allows.

Files (ZeroMQ's certificate format, written by pyzmq's ``zmq.auth.create_certificates``):
``monitor.key`` / ``monitor.key_secret`` and ``publisher.key`` / ``publisher.key_secret``.
A ``.key`` file holds a public key only and may be copied anywhere; a ``.key_secret`` file
holds both halves and stays on the machine that uses it (written readable by its owner only).

:class:`Gatekeeper` runs pyzmq's ZAP handler (:class:`zmq.auth.thread.ThreadAuthenticator`)
on the monitor's context with the public keys found in ``--curve-allow KEYDIR`` (read once,
at start) and counts refused peers:

- a peer whose key is not allowed is refused by the ZAP handler; it counts once per
  (address, key), however often it retries;
- a peer that does not speak CURVE, or that encrypts to another monitor key, fails the
  handshake before any key is known (a socket-monitor event); such failures count one
  refused peer per burst: a failure more than :data:`BURST_GAP_S` after the previous one
  starts a new count (a refused publisher retries every 0.1 s; two of them at once count
  as one, so this part is a lower bound).
"""

from __future__ import annotations

import argparse
import os
import queue
import threading
import time
from pathlib import Path

import zmq
import zmq.auth
from zmq.auth.thread import ThreadAuthenticator

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail

__all__ = [
    "KEY_NAMES",
    "KeyFileError",
    "write_keys",
    "load_secret",
    "load_public",
    "load_allowed",
    "server_options",
    "client_options",
    "Gatekeeper",
    "add_arguments",
    "run",
    "EPILOG",
]

#: The two key pairs ``eddyvigil keys`` writes (file name stems).
KEY_NAMES = ("monitor", "publisher")
#: Handshake failures further apart than this count as different refused peers.
BURST_GAP_S = 5.0

EPILOG = (
    epilog("keys")
    + """
writes DIR/monitor.key, DIR/monitor.key_secret, DIR/publisher.key, DIR/publisher.key_secret
(DIR is created if its parent exists). Use them as

  eddyvigil watch --bind tcp://*:5555 --curve-secret DIR/monitor.key_secret --curve-allow KEYDIR
  eddyvigil simulate --connect tcp://MONITOR:5555 --curve-secret DIR/publisher.key_secret \\
      --curve-server-key DIR/monitor.key

where KEYDIR holds a copy of publisher.key (and of every other publisher's public key).
"""
)


class KeyFileError(Exception):
    """A key file or folder is missing, unreadable or not in ZeroMQ's certificate format."""


def write_keys(directory: str | os.PathLike) -> list[Path]:
    """Write both key pairs into ``directory``; refuses (``FileExistsError``) if any exists.

    Returns the four paths. Secret files are made readable by their owner only.
    """
    d = Path(directory)
    d.mkdir(exist_ok=True)
    targets = [d / f"{name}{ext}" for name in KEY_NAMES for ext in (".key", ".key_secret")]
    existing = [p for p in targets if p.exists()]
    if existing:
        raise FileExistsError(", ".join(str(p) for p in existing))
    old_mask = os.umask(0o077)  # a secret file is never readable by others, not even briefly
    try:
        for name in KEY_NAMES:
            public, secret = zmq.auth.create_certificates(d, name)
            os.chmod(secret, 0o600)
            os.chmod(public, 0o644)
    finally:
        os.umask(old_mask)
    return targets


def _load(path: str | os.PathLike, what: str) -> tuple[bytes, bytes | None]:
    p = Path(path)
    if not p.is_file():
        raise KeyFileError(f"{what} {p}: no such file")
    try:
        public, secret = zmq.auth.load_certificate(p)
    except (OSError, ValueError) as exc:
        raise KeyFileError(f"{what} {p}: not a ZeroMQ key file ({exc})") from None
    if not public or len(public) != 40:
        raise KeyFileError(f"{what} {p}: holds no public key")
    return public, secret


def load_secret(path: str | os.PathLike) -> tuple[bytes, bytes]:
    """(public, secret) Z85 keys from a ``.key_secret`` file; :class:`KeyFileError` if not one."""
    public, secret = _load(path, "--curve-secret")
    if not secret or len(secret) != 40:
        raise KeyFileError(f"--curve-secret {path}: holds no secret key (give the .key_secret "
                           "file, not the .key file)")
    return public, secret


def load_public(path: str | os.PathLike, what: str = "--curve-server-key") -> bytes:
    """The Z85 public key of a ``.key`` (or ``.key_secret``) file."""
    return _load(path, what)[0]


def load_allowed(directory: str | os.PathLike) -> set[bytes]:
    """The public keys of every ``*.key`` file in ``directory`` (at least one)."""
    d = Path(directory)
    if not d.is_dir():
        raise KeyFileError(f"--curve-allow {d}: no such folder")
    keys = set()
    for p in sorted(d.glob("*.key")):
        keys.add(load_public(p, "--curve-allow"))
    if not keys:
        raise KeyFileError(f"--curve-allow {d}: no public key (*.key) in this folder")
    return keys


def server_options(public: bytes, secret: bytes) -> dict:
    """Socket options making a socket the CURVE server (set before bind/connect)."""
    return {zmq.CURVE_PUBLICKEY: public, zmq.CURVE_SECRETKEY: secret, zmq.CURVE_SERVER: 1}


def client_options(public: bytes, secret: bytes, server_public: bytes) -> dict:
    """Socket options making a socket a CURVE client of the server ``server_public``."""
    return {zmq.CURVE_PUBLICKEY: public, zmq.CURVE_SECRETKEY: secret,
            zmq.CURVE_SERVERKEY: server_public}


class _Authenticator(ThreadAuthenticator):
    """pyzmq's ZAP thread; every key decision goes through :meth:`Gatekeeper._decide`."""

    def __init__(self, context, gatekeeper: Gatekeeper):
        super().__init__(context)
        self._gatekeeper = gatekeeper

    async def handle_zap_message(self, msg: list[bytes]) -> None:
        # the peer's address is frame 3 of a ZAP request (RFC 27); keep it for the count
        self._gatekeeper._address = msg[3].decode("utf-8", "replace") if len(msg) > 3 else "?"
        await super().handle_zap_message(msg)


class Gatekeeper:
    """The monitor's CURVE server side: key options, the ZAP handler, refused-peer counts.

    ``refused_peers`` may be read from any thread; :meth:`notices` returns the texts of new
    refusals (for the terminal and the dashboard's transport events) since the last call.
    """

    def __init__(self, secret_file: str | os.PathLike, allow_dir: str | os.PathLike):
        self.public, self.secret = load_secret(secret_file)
        self.allowed = load_allowed(allow_dir)
        self._lock = threading.Lock()
        self._refused_keys: set[tuple[str, bytes]] = set()
        self._failed_bursts = 0
        self._last_failure = -float("inf")
        self._notices: queue.SimpleQueue[str] = queue.SimpleQueue()
        self._auth: _Authenticator | None = None
        self._address = "?"

    @property
    def options(self) -> dict:
        return server_options(self.public, self.secret)

    @property
    def refused_peers(self) -> int:
        with self._lock:
            return len(self._refused_keys) + self._failed_bursts

    def start(self, context: zmq.Context) -> None:
        """Start the ZAP handler on ``context`` (before any CURVE socket of it binds/connects)."""
        self._auth = _Authenticator(context, self)
        self._auth.start()
        self._auth.configure_curve_callback(domain="*", credentials_provider=self)

    def stop(self) -> None:
        if self._auth is not None:
            self._auth.stop()
            self._auth = None

    def callback(self, domain: str, key: bytes) -> bool:
        """ZAP decision (pyzmq's credentials-provider interface; ZAP thread)."""
        return self._decide(self._address, key)

    def _decide(self, address: str, key: bytes) -> bool:
        if key in self.allowed:
            return True
        with self._lock:
            new = (address, key) not in self._refused_keys
            self._refused_keys.add((address, key))
            total = len(self._refused_keys) + self._failed_bursts
        if new:
            self._notices.put(f"{time.strftime('%H:%M:%S')} refused a publisher at {address}: "
                              f"its key {key.decode()[:8]}... is not in --curve-allow "
                              f"({total} refused so far)")
        return False

    def handshake_failed(self, text: str) -> None:
        """A socket-monitor handshake failure (no CURVE, or another monitor key); any thread."""
        now = time.monotonic()
        with self._lock:
            new = now - self._last_failure > BURST_GAP_S
            self._last_failure = now
            if new:
                self._failed_bursts += 1
            total = len(self._refused_keys) + self._failed_bursts
        if new:
            self._notices.put(f"{text}: a peer without CURVE or with another monitor key was "
                              f"refused ({total} refused so far)")

    def notices(self) -> list[str]:
        out = []
        while True:
            try:
                out.append(self._notices.get_nowait())
            except queue.Empty:
                return out


# ----------------------------------------------------------------------- eddyvigil keys


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("dir", metavar="DIR", help="folder to write the four key files into")


def run(args: argparse.Namespace) -> int:
    d = Path(args.dir)
    if d.exists() and not d.is_dir():
        return fail("keys", ExitCode.CANNOT_WRITE, f"{d} exists and is not a folder")
    if not d.parent.is_dir():
        return fail("keys", ExitCode.CANNOT_WRITE, f"{d.parent} does not exist")
    try:
        paths = write_keys(d)
    except FileExistsError as exc:
        return fail("keys", ExitCode.OUTPUT_EXISTS,
                    f"keys exist already ({exc}); keys are never overwritten: "
                    "choose another folder or remove them yourself")
    except OSError as exc:
        return fail("keys", ExitCode.CANNOT_WRITE, f"cannot write into {d}: {exc.strerror}")
    for p in paths:
        print(p)
    return ExitCode.OK
