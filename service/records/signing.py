"""Signed checkpoints: Ed25519 signatures over the size and root of the decision log.

The signed message is the RFC 8785 canonical JSON of ``{"size": N, "root_sha256": hex}``
(so ``{"root_sha256":"…","size":N}`` in bytes). Hashes are lower-case hex; the signature
(64 bytes) and the public key (32 bytes) are standard base64 with padding (RFC 4648 §4)
of their raw forms (RFC 8032 §5.1.5, §5.1.6). Ed25519 signatures are deterministic, so
the same checkpoint signed twice gives the same bytes.

The key
-------
A PEM file holding an unencrypted PKCS#8 Ed25519 private key (RFC 8410), the form
``openssl genpkey -algorithm ed25519`` writes and ``openssl pkey -pubout`` reads. It comes
from ``CERTIMATCH_SIGNING_KEY_FILE``; without it, :func:`load_or_create_key` generates
one as ``signing-key.pem`` in the data directory on first start, with mode 0600, created
atomically so that several workers starting at once end up with the same key. A key file
that others may write is refused: whoever can replace it can sign any log.

``key_id`` is the first 16 hex digits of SHA-256 of the raw public key: a short label to
tell keys apart in logs and exports. It is not a trust anchor; an auditor pins the
public key itself.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import os
import stat
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import (
    Ed25519PrivateKey,
    Ed25519PublicKey,
)

from service.records.canonical import canonical_json

__all__ = [
    "GENERATED_KEY_NAME",
    "Checkpoint",
    "KeyFileError",
    "Signer",
    "checkpoint_message",
    "key_id",
    "load_or_create_key",
    "load_key",
    "verify_checkpoint",
]

#: The file a generated key is written to, inside the data directory.
GENERATED_KEY_NAME = "signing-key.pem"


class KeyFileError(ValueError):
    """The signing key file cannot be used; the message says why and which file."""


@dataclass(frozen=True)
class Checkpoint:
    """A signed tree head, as ``GET /v1/log/checkpoint`` serves it."""

    size: int
    root_sha256: str
    signature: str
    public_key: str
    key_id: str

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def checkpoint_message(size: int, root_sha256: str) -> bytes:
    """The bytes a checkpoint signs: RFC 8785 JSON of ``{"size", "root_sha256"}``."""
    return canonical_json({"size": size, "root_sha256": root_sha256})


def _raw_public(public: Ed25519PublicKey) -> bytes:
    return public.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


def key_id(public_key: bytes) -> str:
    """First 16 hex digits of SHA-256 of the raw 32-byte public key."""
    return hashlib.sha256(public_key).hexdigest()[:16]


class Signer:
    """Signs checkpoints with one Ed25519 private key."""

    def __init__(self, private_key: Ed25519PrivateKey) -> None:
        self._key = private_key
        self.public_key = _raw_public(private_key.public_key())
        self.public_key_b64 = base64.b64encode(self.public_key).decode("ascii")
        self.key_id = key_id(self.public_key)

    def sign(self, size: int, root: bytes) -> Checkpoint:
        """The checkpoint of a tree of ``size`` leaves with root hash ``root``."""
        root_hex = root.hex()
        signature = self._key.sign(checkpoint_message(size, root_hex))
        return Checkpoint(size, root_hex, base64.b64encode(signature).decode("ascii"),
                          self.public_key_b64, self.key_id)


def verify_checkpoint(checkpoint: Any, public_key: str | None = None) -> str | None:
    """None when ``checkpoint`` (a mapping of the five fields) is validly signed, else
    what is wrong. ``public_key`` (base64) pins the key; without it the checkpoint's own
    key is used, which proves only that its holder signed it."""
    try:
        size, root = checkpoint["size"], checkpoint["root_sha256"]
        shown_key = checkpoint["public_key"]
        signature = base64.b64decode(checkpoint["signature"], validate=True)
        key = base64.b64decode(public_key if public_key is not None else shown_key,
                               validate=True)
    except (KeyError, TypeError, binascii.Error):
        return "the checkpoint lacks a field or holds malformed base64"
    if public_key is not None and shown_key != public_key:
        return "the checkpoint names a public key other than the pinned one"
    if checkpoint.get("key_id") != key_id(key):
        return "key_id does not match the public key"
    if (type(size) is not int or size < 0 or not isinstance(root, str) or len(root) != 64
            or root != root.lower() or any(c not in "0123456789abcdef" for c in root)):
        return "size must be a whole number and root_sha256 64 lower-case hex digits"
    if len(key) != 32 or len(signature) != 64:
        return "the public key must be 32 bytes and the signature 64"
    try:
        Ed25519PublicKey.from_public_bytes(key).verify(signature,
                                                       checkpoint_message(size, root))
    except InvalidSignature:
        return "the signature does not match the size and root"
    return None


def load_key(path: str | os.PathLike[str]) -> Ed25519PrivateKey:
    """The Ed25519 private key of a PEM (PKCS#8) file; KeyFileError when it cannot be."""
    file = Path(path)
    try:
        info = file.stat()
        data = file.read_bytes()
    except OSError as e:
        raise KeyFileError(f"signing key file {file} cannot be read: {e.strerror}") from None
    if info.st_mode & (stat.S_IWGRP | stat.S_IWOTH):
        raise KeyFileError(f"signing key file {file} may be written by others "
                           f"(mode {stat.S_IMODE(info.st_mode):04o}); allow 0600 at most")
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except (ValueError, TypeError) as e:
        raise KeyFileError(f"signing key file {file} is not an unencrypted PEM private "
                           f"key: {e}") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise KeyFileError(f"signing key file {file} holds a key of another kind "
                           f"({type(key).__name__}), not an Ed25519 key")
    return key


def load_or_create_key(key_file: str | None, data_dir: str | os.PathLike[str]
                       ) -> Ed25519PrivateKey:
    """The key of ``key_file`` when given, else the data directory's generated key,
    created on first use (mode 0600, atomically: several processes get one key)."""
    if key_file:
        return load_key(key_file)
    folder = Path(data_dir)
    target = folder / GENERATED_KEY_NAME
    if target.exists():
        return load_key(target)
    folder.mkdir(parents=True, exist_ok=True)
    pem = Ed25519PrivateKey.generate().private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption())
    temporary = folder / f".{GENERATED_KEY_NAME}.{os.getpid()}.tmp"
    fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    try:
        os.write(fd, pem)
        os.fsync(fd)
    finally:
        os.close(fd)
    try:
        os.link(temporary, target)          # fails if another process got there first
    except FileExistsError:
        pass
    finally:
        temporary.unlink()
    return load_key(target)
