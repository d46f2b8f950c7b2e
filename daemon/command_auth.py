"""Who may change the station: commands signed with an operator's key (HMAC-SHA256, RFC 2104).

MQTT does not tell a subscriber who published a message, and a broker may let anyone connect,
so the station checks each state-changing command itself. A signed command carries an ``auth``
object next to its fields::

    {"command": "tare", "auth": {"operator": "ana", "ts": 1764871200.0,
                                 "nonce": "9f…", "sig": "<64 hex digits>"}}

``sig`` is HMAC-SHA256 with the operator's key over the *canonical* form of the whole command
with ``auth`` but without ``sig``: JSON with keys sorted, no whitespace (separators ``,`` and
``:``), non-ASCII escaped (Python's ``json.dumps(obj, sort_keys=True, separators=(",", ":"))``).
The station accepts it when the operator is known, the signature matches, ``ts`` (Unix seconds)
is within ``window_s`` of the station's clock and the nonce was not seen in that window
(a replay is refused). Read-only commands (``ping``) need no signature.

Keys live in a key file, one ``OPERATOR HEX-KEY`` line per operator (``#`` comments); the
station's file lists every operator, an operator's own file (for ``heft dash --key-file``) holds
just that one line. A key file that its group or others may read is refused, as ssh refuses a
private key: the keys are secrets.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import math
import os
import re
import secrets
import stat
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from heft.daemon.command_api import READ_ONLY_COMMANDS
from heft.daemon.config_sections import CommandsConfig

log = logging.getLogger(__name__)

KEY_BYTES = 32
DEFAULT_WINDOW_S = 30.0
MAX_NONCES = 100_000  # only valid signatures add one, so this bounds an operator's own burst
OPERATOR_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.@-]{0,63}$")
_NONCE_PATTERN = re.compile(r"^[A-Za-z0-9_-]{8,64}$")
_SIG_PATTERN = re.compile(r"^[0-9a-f]{64}$")


class KeyFileError(Exception):
    """A key file that cannot be used; the message names the file and what is wrong."""


def canonical(obj: Mapping[str, Any]) -> bytes:
    """The bytes a signature covers (see the module docstring)."""
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    ).encode("ascii")


def signature(key: bytes, obj: Mapping[str, Any]) -> str:
    return hmac.new(key, canonical(obj), hashlib.sha256).hexdigest()


def load_keys(path: Path) -> dict[str, bytes]:
    """Operator -> key from a key file. Raises KeyFileError naming the file and the problem."""
    try:
        mode = path.stat().st_mode
        if mode & (stat.S_IRWXG | stat.S_IRWXO):
            raise KeyFileError(
                f"{path}: permissions {stat.S_IMODE(mode):04o} let others read the operator "
                f"keys; expected 0600 (chmod 600 {path})"
            )
        text = path.read_text(encoding="utf-8")
    except OSError as err:
        raise KeyFileError(f"{path}: cannot read the key file ({err.strerror or err})") from err
    keys: dict[str, bytes] = {}
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        words = line.split()
        where = f"{path} line {number}"
        if len(words) != 2 or not OPERATOR_PATTERN.match(words[0]):
            raise KeyFileError(f"{where}: expected 'OPERATOR HEX-KEY'")  # never echo a key
        try:
            key = bytes.fromhex(words[1])
        except ValueError:
            raise KeyFileError(f"{where}: the key is not hexadecimal") from None
        if len(key) < 16:
            raise KeyFileError(f"{where}: the key is {len(key)} bytes, expected at least 16")
        if words[0] in keys:
            raise KeyFileError(f"{where}: operator {words[0]!r} is listed twice")
        keys[words[0]] = key
    if not keys:
        raise KeyFileError(f"{path}: no operator keys in the file")
    return keys


def new_key_file(path: Path, operator: str) -> None:
    """Write a fresh random key for ``operator`` to a new file readable by its owner only."""
    if not OPERATOR_PATTERN.match(operator):
        raise KeyFileError(
            f"operator {operator!r}: expected letters, digits and . _ @ - (at most 64)"
        )
    line = f"{operator} {secrets.token_hex(KEY_BYTES)}\n"
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:
        raise KeyFileError(f"{path}: already exists; choose a new file") from None
    except OSError as err:
        raise KeyFileError(f"{path}: cannot create ({err.strerror or err})") from err
    with os.fdopen(fd, "w", encoding="utf-8") as out:
        out.write(line)


@dataclass(frozen=True)
class Signer:
    """Signs commands as one operator (the dashboard, tests, a script)."""

    operator: str
    key: bytes = b""

    @classmethod
    def from_file(cls, path: Path) -> Signer:
        """The single operator of an operator's key file."""
        keys = load_keys(path)
        if len(keys) != 1:
            raise KeyFileError(
                f"{path}: holds {len(keys)} operators; an operator's key file holds one"
            )
        ((operator, key),) = keys.items()
        return cls(operator, key)

    def sign(self, command: Mapping[str, Any], now_s: float | None = None) -> dict[str, Any]:
        """``command`` with an ``auth`` object added (a fresh nonce each call)."""
        auth = {
            "operator": self.operator,
            "ts": round(time.time() if now_s is None else now_s, 3),
            "nonce": secrets.token_hex(16),
        }
        body = {**command, "auth": auth}
        return {**command, "auth": {**auth, "sig": signature(self.key, body)}}

    def __repr__(self) -> str:  # the key is a secret: never in a log line or traceback
        return f"Signer(operator={self.operator!r}, key=***)"


@dataclass(frozen=True)
class Verdict:
    """What the station decided: the command (``auth`` removed) and who signed it, or why not."""

    command: dict[str, Any]
    operator: str | None = None
    refusal: str | None = None


class CommandAuthority:
    """Decides whether a decoded command may run.

    Args:
        keys: operator -> key; empty refuses every state-changing command (unless open).
        open_bench: take unsigned state-changing commands too (a bench on a trusted network;
            signed ones are still checked and carry their operator).
        window_s: how far a signature's timestamp may be from the station's clock.
        clock: wall clock in Unix seconds (tests pass their own).
    """

    def __init__(
        self,
        keys: Mapping[str, bytes],
        *,
        open_bench: bool = False,
        window_s: float = DEFAULT_WINDOW_S,
        clock: Callable[[], float] = time.time,
    ) -> None:
        self._keys = dict(keys)
        self.open_bench = open_bench
        self.window_s = window_s
        self._clock = clock
        self._nonces: dict[str, float] = {}  # nonce -> when it may be forgotten

    @classmethod
    def open(cls) -> CommandAuthority:
        """Anyone may command the station (tests and a bench that says so in its config)."""
        return cls({}, open_bench=True)

    def __repr__(self) -> str:
        return f"CommandAuthority(operators={sorted(self._keys)}, open_bench={self.open_bench})"

    def check(self, obj: Mapping[str, Any]) -> Verdict:
        body = dict(obj)
        auth = body.pop("auth", None)
        if "operator" in body:
            return Verdict(body, refusal="refused: operator: set from the signature, not sent")
        if auth is None:
            name = body.get("command")
            if name in READ_ONLY_COMMANDS or self.open_bench:
                return Verdict(body)
            if not self._keys:
                return Verdict(body, refusal=(
                    "refused: no operator keys are configured (commands.keys_file) and the "
                    "bench is not open (commands.open_bench); state-changing commands are off"
                ))
            return Verdict(body, refusal=(
                f"refused: {str(name)[:40]!r} changes the station; sign it with an operator key"
            ))
        problem, operator = self._verify(body, auth)
        if problem is not None:
            return Verdict(body, refusal=f"refused: auth: {problem}")
        return Verdict(body, operator=operator)

    def _verify(self, body: dict[str, Any], auth: Any) -> tuple[str | None, str | None]:
        if not isinstance(auth, dict) or set(auth) != {"operator", "ts", "nonce", "sig"}:
            return "expected an object with operator, ts, nonce and sig", None
        operator, ts, nonce, sig = (auth[k] for k in ("operator", "ts", "nonce", "sig"))
        if not isinstance(operator, str) or operator not in self._keys:
            return "unknown operator", None
        if not isinstance(ts, int | float) or isinstance(ts, bool) or not math.isfinite(ts):
            return "ts: expected Unix seconds", None
        if not isinstance(nonce, str) or not _NONCE_PATTERN.match(nonce):
            return "nonce: expected 8 to 64 letters, digits, _ or -", None
        if not isinstance(sig, str) or not _SIG_PATTERN.match(sig):
            return "sig: expected 64 lowercase hex digits", None
        signed = {**body, "auth": {"operator": operator, "ts": ts, "nonce": nonce}}
        if not hmac.compare_digest(signature(self._keys[operator], signed), sig):
            return "bad signature", None
        now = self._clock()
        if abs(now - ts) > self.window_s:
            off = f"{now - ts:+.0f} s"
            return f"ts is {off} from the station's clock (window ±{self.window_s:g} s)", None
        self._forget_old(now)
        if nonce in self._nonces:
            return "replayed (nonce already used)", None
        if len(self._nonces) >= MAX_NONCES:
            return "too many signed commands in the window; try again shortly", None
        self._nonces[nonce] = ts + self.window_s
        return None, operator

    def _forget_old(self, now: float) -> None:
        # A nonce older than the window cannot come back: its timestamp would be refused.
        for nonce in [n for n, until in self._nonces.items() if until < now]:
            del self._nonces[nonce]


def authority_from_config(commands: CommandsConfig) -> CommandAuthority:
    """The station's authority from its ``[commands]`` section, saying at start what it allows.

    A key file that cannot be used (unreadable, readable by others, malformed) is logged and
    refuses state-changing commands, as ssh refuses a private key others can read.
    """
    keys: dict[str, bytes] = {}
    if commands.keys_file is not None:
        try:
            keys = load_keys(commands.keys_file)
        except KeyFileError as err:
            log.error("operator keys not loaded: %s", err)
    if commands.open_bench:
        log.warning(
            "commands.open_bench = true: anyone who can reach the broker may tare, zero, "
            "calibrate and change the selection of this station"
        )
    elif keys:
        log.info("%d operator key(s) loaded; state-changing commands must be signed", len(keys))
    else:
        log.warning(
            "no operator keys (commands.keys_file): state-changing MQTT commands are refused"
        )
    return CommandAuthority(keys, open_bench=commands.open_bench, window_s=commands.window_s)
