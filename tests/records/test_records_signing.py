"""Signed checkpoints and the signing key. OpenSSL (the command-line tool) is the outside
reference: it makes keys the service must load and checks signatures the service made."""

from __future__ import annotations

import base64
import hashlib
import multiprocessing
import os
import shutil
import subprocess
from pathlib import Path

import pytest
import rfc8785
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from service.records.signing import (
    GENERATED_KEY_NAME,
    KeyFileError,
    Signer,
    checkpoint_message,
    key_id,
    load_key,
    load_or_create_key,
    verify_checkpoint,
)

ROOT = bytes.fromhex("5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328")
openssl = pytest.mark.skipif(shutil.which("openssl") is None, reason="needs openssl")


def test_the_signed_message_is_rfc8785_json() -> None:
    # the rfc8785 package writes the same bytes
    assert checkpoint_message(8, ROOT.hex()) == rfc8785.dumps({"size": 8,
                                                               "root_sha256": ROOT.hex()})
    assert checkpoint_message(8, ROOT.hex()) == (
        b'{"root_sha256":"5dc9da79a70659a9ad559cb701ded9a2ab9d823aad2f4960cfe370eff4604328",'
        b'"size":8}')


def test_checkpoint_fields_and_their_forms() -> None:
    signer = Signer(Ed25519PrivateKey.generate())
    cp = signer.sign(8, ROOT)
    assert cp.size == 8 and cp.root_sha256 == ROOT.hex()
    assert len(base64.b64decode(cp.signature, validate=True)) == 64      # RFC 8032 §5.1.6
    raw_key = base64.b64decode(cp.public_key, validate=True)
    assert len(raw_key) == 32
    assert cp.key_id == hashlib.sha256(raw_key).hexdigest()[:16] == key_id(raw_key)
    assert signer.sign(8, ROOT) == cp                    # Ed25519 is deterministic
    assert verify_checkpoint(cp.to_dict(), cp.public_key) is None


@pytest.mark.parametrize(("change", "why"), [
    ({"size": 9}, "the signature does not match the size and root"),
    ({"root_sha256": "00" * 32}, "the signature does not match the size and root"),
    ({"root_sha256": ROOT.hex().upper()}, "64 lower-case hex digits"),
    ({"size": -1}, "size must be a whole number"),
    ({"signature": "!!"}, "malformed base64"),
    ({"key_id": "0" * 16}, "key_id does not match the public key"),
])
def test_a_changed_checkpoint_fails(change: dict, why: str) -> None:
    signer = Signer(Ed25519PrivateKey.generate())
    cp = {**signer.sign(8, ROOT).to_dict(), **change}
    problem = verify_checkpoint(cp, signer.public_key_b64)
    assert problem is not None and why in problem


def test_a_flipped_signature_bit_fails() -> None:
    signer = Signer(Ed25519PrivateKey.generate())
    cp = signer.sign(8, ROOT).to_dict()
    raw = bytearray(base64.b64decode(cp["signature"]))
    raw[0] ^= 1
    cp["signature"] = base64.b64encode(raw).decode()
    assert verify_checkpoint(cp) == "the signature does not match the size and root"


@openssl
def test_openssl_verifies_the_signature(tmp_path: Path) -> None:
    # OpenSSL 3 pkeyutl verifies a raw Ed25519 signature over the message
    key_file = tmp_path / "key.pem"
    subprocess.run(["openssl", "genpkey", "-algorithm", "ed25519", "-out", str(key_file)],
                   check=True)
    key_file.chmod(0o600)
    signer = Signer(load_key(key_file))
    cp = signer.sign(8, ROOT)
    (tmp_path / "msg").write_bytes(checkpoint_message(cp.size, cp.root_sha256))
    (tmp_path / "sig").write_bytes(base64.b64decode(cp.signature))
    subprocess.run(["openssl", "pkey", "-in", str(key_file), "-pubout", "-out",
                    str(tmp_path / "pub.pem")], check=True)
    done = subprocess.run(["openssl", "pkeyutl", "-verify", "-pubin", "-inkey",
                           str(tmp_path / "pub.pem"), "-rawin", "-in", str(tmp_path / "msg"),
                           "-sigfile", str(tmp_path / "sig")], capture_output=True, text=True)
    assert done.returncode == 0 and "Signature Verified Successfully" in done.stdout
    # and the public key OpenSSL derives is the one the checkpoint carries
    der = subprocess.run(["openssl", "pkey", "-in", str(key_file), "-pubout", "-outform",
                          "DER"], check=True, capture_output=True).stdout
    assert der[-32:] == base64.b64decode(cp.public_key)


def test_a_key_is_generated_once_with_mode_0600(tmp_path: Path) -> None:
    data = tmp_path / "data"
    key = load_or_create_key(None, data)
    path = data / GENERATED_KEY_NAME
    assert path.stat().st_mode & 0o777 == 0o600
    again = load_or_create_key(None, data)
    raw = serialization.Encoding.Raw, serialization.PublicFormat.Raw
    assert key.public_key().public_bytes(*raw) == again.public_key().public_bytes(*raw)
    assert [p.name for p in data.iterdir()] == [GENERATED_KEY_NAME]


def _make_key(data: str) -> bytes:
    key = load_or_create_key(None, data)
    return key.public_key().public_bytes(serialization.Encoding.Raw,
                                         serialization.PublicFormat.Raw)


def test_workers_starting_together_share_one_generated_key(tmp_path: Path) -> None:
    with multiprocessing.get_context("spawn").Pool(4) as pool:
        keys = pool.map(_make_key, [str(tmp_path)] * 8)
    assert len(set(keys)) == 1


def test_the_key_file_setting_wins(tmp_path: Path) -> None:
    given = tmp_path / "given.pem"
    given.write_bytes(Ed25519PrivateKey.generate().private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption()))
    given.chmod(0o600)
    load_or_create_key(str(given), tmp_path / "data")
    assert not (tmp_path / "data").exists()


def _write(path: Path, data: bytes, mode: int = 0o600) -> Path:
    path.write_bytes(data)
    path.chmod(mode)
    return path


def test_unusable_key_files_are_refused(tmp_path: Path) -> None:
    ed = Ed25519PrivateKey.generate().private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption())
    with pytest.raises(KeyFileError, match=r"may be written by others \(mode 0620\)"):
        load_key(_write(tmp_path / "a.pem", ed, 0o620))
    with pytest.raises(KeyFileError, match="is not an unencrypted PEM private key"):
        load_key(_write(tmp_path / "b.pem", b"not a key"))
    ec_key = ec.generate_private_key(ec.SECP256R1()).private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption())
    with pytest.raises(KeyFileError, match=r"another kind \(.*\), not an Ed25519 key"):
        load_key(_write(tmp_path / "c.pem", ec_key))
    with pytest.raises(KeyFileError, match="cannot be read"):
        load_key(tmp_path / "missing.pem")
    assert os.path.exists(tmp_path / "a.pem")
