"""Signed sign-off steps: OpenSSH signatures (the SSHSIG format of ``ssh-keygen -Y sign``) over a digest.

A step of the sign-off (checked, approved) may carry a signature made with the engineer's own
OpenSSH key. What is signed is a short canonical JSON text, :func:`signed_message`: the step
(state, who, when, principal) and three SHA-256 digests, of the raw-file hashes, of the
interpretation without its sign-off and revision, and of the results without their provenance.
A changed pick, a changed raw file or a changed number therefore breaks the signature, and the
digests say which of the three changed.

Signing runs ``ssh-keygen -Y sign`` (the key, its passphrase and any agent stay OpenSSH's business:
Shearbook keeps no keys). Checking is done here, with the ``cryptography`` package, for Ed25519
keys, following OpenSSH's PROTOCOL.sshsig; who may sign is said by an allowed-signers file in
OpenSSH's format (ssh-keygen(1), section ALLOWED SIGNERS).
"""

from __future__ import annotations

import base64
import binascii
import fnmatch
import hashlib
import json
import shlex
import shutil
import subprocess
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from typing_extensions import TypedDict  # pydantic reads typing_extensions' TypedDict on Python 3.11

from .errors import ShearbookError

__all__ = ["NAMESPACE", "AllowedSigner", "Check", "Digests", "StepSignature", "check_history", "check_step",
           "digests_of",
           "read_allowed_signers", "sign_message", "signed_message"]

NAMESPACE = "shearbook-signoff"  # the SSHSIG namespace: a signature made for another purpose never passes here
MESSAGE_SCHEMA = "shearbook.signoff-message/1"
ARMOR_BEGIN, ARMOR_END = "-----BEGIN SSH SIGNATURE-----", "-----END SSH SIGNATURE-----"
Status = Literal["unsigned", "valid", "invalid", "unknown key", "not checked"]


class Digests(TypedDict):
    """SHA-256 (hex) of the three things a step signs."""

    raw_files: str
    interpretation: str
    results: str


class StepSignature(TypedDict):
    """The signature of one sign-off step, as stored in the interpretation file."""

    principal: str  # who the signer says they are, as in the allowed-signers file (usually an e-mail address)
    digests: Digests
    sshsig: str  # the armoured SSH signature ("-----BEGIN SSH SIGNATURE-----" ...)


def _canonical(value: Any) -> bytes:
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"), allow_nan=False).encode()


def _sha(value: Any) -> str:
    return hashlib.sha256(_canonical(value)).hexdigest()


def digests_of(raw_files: Mapping[str, Any], interpretation: Mapping[str, Any],
               results: Mapping[str, Any]) -> Digests:
    """The digests a step signs. ``raw_files``: name -> SHA-256 (or {"sha256": ...}); the others as JSON dicts.

    The sign-off and the revision counter are left out of the interpretation (each step adds to them),
    the provenance out of the results (it holds the time, the platform and the interpretation's own hash).
    """
    raw = {k: (v["sha256"] if isinstance(v, Mapping) else v) for k, v in raw_files.items()}
    interp = {k: v for k, v in interpretation.items() if k not in ("signoff", "revision")}
    res = {k: v for k, v in results.items() if k != "provenance"}
    return Digests(raw_files=_sha(raw), interpretation=_sha(interp), results=_sha(res))


def signed_message(step: Mapping[str, Any], principal: str, digests: Digests) -> bytes:
    """The exact bytes a step's signature is made over."""
    return _canonical({"schema": MESSAGE_SCHEMA, "state": step["state"], "who": step["who"],
                       "time_utc": step["time_utc"], "principal": principal, "digests": dict(digests)})


def sign_message(message: bytes, key: Path, ssh_keygen: str | None = None) -> str:
    """Sign with ``ssh-keygen -Y sign -f KEY -n shearbook-signoff``; the armoured signature.

    ``key`` is the private key file, or the public key of a key held by ssh-agent. A passphrase is
    asked for by ssh-keygen itself, on the terminal.
    """
    exe = ssh_keygen or shutil.which("ssh-keygen")
    if exe is None:
        raise ShearbookError("signing needs OpenSSH's ssh-keygen (8.1 or later), which was not found on PATH: "
                             "install the OpenSSH client (Debian: apt-get install openssh-client) and sign again.")
    if not key.is_file():
        raise ShearbookError(f"{key}: key file not found; name your OpenSSH private key (e.g. ~/.ssh/id_ed25519).")
    proc = subprocess.run([exe, "-Y", "sign", "-f", str(key), "-n", NAMESPACE], input=message,
                          capture_output=True, check=False)
    if proc.returncode != 0 or ARMOR_BEGIN.encode() not in proc.stdout:
        said = proc.stderr.decode(errors="replace").strip().splitlines()
        raise ShearbookError(f"{key}: ssh-keygen could not sign ({said[-1] if said else f'exit {proc.returncode}'}). "
                             "Nothing was written.")
    return proc.stdout.decode().strip()


# --- reading SSHSIG (OpenSSH PROTOCOL.sshsig) -------------------------------------------------------------


class _Bad(ValueError):
    """A signature that does not parse or does not verify; the message says why."""


def _strings(data: bytes) -> list[bytes]:
    out, i = [], 0
    while i < len(data):
        if i + 4 > len(data):
            raise _Bad("truncated")
        n = int.from_bytes(data[i:i + 4], "big")
        if i + 4 + n > len(data):
            raise _Bad("truncated")
        out.append(data[i + 4:i + 4 + n])
        i += 4 + n
    return out


def _ssh_string(b: bytes) -> bytes:
    return len(b).to_bytes(4, "big") + b


def fingerprint(public_blob: bytes) -> str:
    """OpenSSH's SHA256 fingerprint of a public key blob (as ``ssh-keygen -l`` prints it)."""
    return "SHA256:" + base64.b64encode(hashlib.sha256(public_blob).digest()).decode().rstrip("=")


@dataclass(frozen=True)
class _Parsed:
    public_blob: bytes
    namespace: str
    hash_alg: str
    signature: bytes


def _parse(armoured: str) -> _Parsed:
    text = armoured.strip()
    if not (text.startswith(ARMOR_BEGIN) and text.endswith(ARMOR_END)):
        raise _Bad("not an armoured SSH signature")
    try:
        blob = base64.b64decode("".join(text[len(ARMOR_BEGIN):-len(ARMOR_END)].split()), validate=True)
    except binascii.Error:
        raise _Bad("its base64 is damaged") from None
    if blob[:6] != b"SSHSIG" or int.from_bytes(blob[6:10], "big") != 1:
        raise _Bad("not an SSHSIG version 1 signature")
    fields = _strings(blob[10:])
    if len(fields) != 5:
        raise _Bad("damaged SSHSIG fields")
    public, namespace, _reserved, hash_alg, signature = fields
    return _Parsed(public, namespace.decode(errors="replace"), hash_alg.decode(errors="replace"), signature)


def _verify(parsed: _Parsed, message: bytes) -> None:
    """Raise :class:`_Bad` unless the signature is a valid Ed25519 SSHSIG of ``message`` in our namespace."""
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    if parsed.namespace != NAMESPACE:
        raise _Bad(f"made for the namespace {parsed.namespace!r}, not {NAMESPACE!r}")
    hashers = {"sha512": hashlib.sha512, "sha256": hashlib.sha256}
    if parsed.hash_alg not in hashers:
        raise _Bad(f"unknown hash algorithm {parsed.hash_alg!r}")
    key_fields = _strings(parsed.public_blob)
    if not key_fields or key_fields[0] != b"ssh-ed25519":
        kind = key_fields[0].decode(errors="replace") if key_fields else "?"
        raise _Bad(f"a {kind} key: Shearbook checks Ed25519 signatures (make one with an ssh-ed25519 key)")
    sig_fields = _strings(parsed.signature)
    if len(key_fields) != 2 or len(sig_fields) != 2 or sig_fields[0] != b"ssh-ed25519":
        raise _Bad("damaged key or signature fields")
    signed = (b"SSHSIG" + _ssh_string(NAMESPACE.encode()) + _ssh_string(b"") + _ssh_string(parsed.hash_alg.encode())
              + _ssh_string(hashers[parsed.hash_alg](message).digest()))
    try:
        Ed25519PublicKey.from_public_bytes(key_fields[1]).verify(sig_fields[1], signed)
    except (InvalidSignature, ValueError):
        raise _Bad("the signature does not verify: the signed text or the signature was changed") from None


# --- allowed signers (ssh-keygen(1), ALLOWED SIGNERS) ------------------------------------------------------


@dataclass(frozen=True)
class AllowedSigner:
    principals: tuple[str, ...]  # patterns ("*" and "?" allowed), as in the file
    public_blob: bytes
    namespaces: tuple[str, ...] | None  # None: any namespace
    line: int

    def allows(self, principal: str, blob: bytes) -> bool:
        return (blob == self.public_blob and any(fnmatch.fnmatchcase(principal, p) for p in self.principals)
                and (self.namespaces is None or any(fnmatch.fnmatchcase(NAMESPACE, n) for n in self.namespaces)))


def _options(text: str) -> dict[str, str]:
    out = {}
    for item in shlex.split(text.replace(",", " ")) if text else []:
        name, _, value = item.partition("=")
        out[name.lower()] = value
    return out


def read_allowed_signers(path: Path) -> list[AllowedSigner]:
    """An allowed-signers file: ``principals [options] keytype base64-key [comment]`` per line."""
    if not path.is_file():
        raise ShearbookError(f"{path}: allowed-signers file not found; name a file in OpenSSH's allowed_signers "
                             "format (one line per signer: principal, key type, key).")
    out: list[AllowedSigner] = []
    for n, raw in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        try:
            parts = shlex.split(line, posix=True)
        except ValueError as exc:
            raise ShearbookError(f"{path}, line {n}: cannot be read ({exc}).") from None
        key_at = next((i for i, p in enumerate(parts) if p.startswith(("ssh-", "ecdsa-", "sk-"))), None)
        if key_at is None or key_at == 0 or key_at + 1 >= len(parts) or key_at > 2:
            raise ShearbookError(f"{path}, line {n}: expected 'principals [options] key-type base64-key', "
                                 f"got {line[:60]!r}.")
        opts = _options(parts[1]) if key_at == 2 else {}
        if "cert-authority" in opts:
            raise ShearbookError(f"{path}, line {n}: cert-authority lines (SSH certificates) are not supported; "
                                 "list each signer's own key.")
        try:
            blob = base64.b64decode(parts[key_at + 1], validate=True)
        except binascii.Error:
            raise ShearbookError(f"{path}, line {n}: the key's base64 is damaged.") from None
        namespaces = tuple(opts["namespaces"].split(",")) if "namespaces" in opts else None
        out.append(AllowedSigner(tuple(parts[0].split(",")), blob, namespaces, n))
    return out


# --- checking one step ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Check:
    """The outcome of checking one sign-off step's signature."""

    status: Status
    detail: str
    fingerprint: str = ""
    principal: str = ""

    @property
    def text(self) -> str:
        return f"{self.status}: {self.detail}"


def check_history(history: Sequence[Mapping[str, Any]], raw_files: Mapping[str, Any],
                  interpretation: Mapping[str, Any], results: Mapping[str, Any],
                  allowed: list[AllowedSigner] | None) -> list[Check]:
    """Every step of a sign-off history checked against these raw files, interpretation and results (JSON)."""
    now = digests_of(raw_files, interpretation, results)
    return [check_step(step, now, allowed) for step in history]


def check_step(step: Mapping[str, Any], now: Digests, allowed: list[AllowedSigner] | None) -> Check:
    """Check ``step``'s signature against the digests of what the record or project holds ``now``.

    ``allowed`` None: the signature is checked, the signer's trust is not ("not checked").
    """
    sig = step.get("signature")
    if not sig:
        return Check("unsigned", "no signature")
    principal = str(sig.get("principal", ""))
    try:
        parsed = _parse(str(sig.get("sshsig", "")))
        fp = fingerprint(parsed.public_blob)
        _verify(parsed, signed_message(step, principal, sig["digests"]))
    except (_Bad, KeyError, TypeError) as exc:
        return Check("invalid", f"{exc}", principal=principal)
    changed = [k for k in ("raw_files", "interpretation", "results") if sig["digests"].get(k) != now[k]]
    if changed:
        what = {"raw_files": "the raw files", "interpretation": "the interpretation", "results": "the results"}
        return Check("invalid", "the signed content differs from this record: " + ", ".join(what[c] for c in changed)
                     + " changed since the step was signed", fp, principal)
    if allowed is None:
        return Check("not checked", f"signature verifies with key {fp} ({principal}); the signer was not checked "
                     "against an allowed-signers file", fp, principal)
    if any(a.allows(principal, parsed.public_blob) for a in allowed):
        return Check("valid", f"signed by {principal} with key {fp}, an allowed signer", fp, principal)
    return Check("unknown key", f"signature verifies, but key {fp} is not an allowed signer for {principal}",
                 fp, principal)
