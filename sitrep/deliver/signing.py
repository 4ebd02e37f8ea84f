"""Ed25519 signatures over a bundle's checksum list, and the keys that make them.

A bundle's ``manifest-sha256.txt`` lists the SHA-256 of every other file,
``manifest.json`` included, so one signature over it covers the whole bundle.
The signature lives in ``manifest.sig`` inside the bundle, a small JSON
document::

    {
      "algorithm": "Ed25519",
      "public_key": "<base64 of the 32-byte raw public key>",
      "fingerprint": "sha256:<hex of SHA-256 of the raw public key>",
      "signed_at": "2026-11-23T06:00:05Z",
      "signed": {"bundle": "2026-W47/v1", "file": "manifest-sha256.txt", "sha256": "<hex>"},
      "signature": "<base64 of the 64-byte signature>"
    }

The signature is made over the canonical JSON of every key but
``signature`` (sorted keys, no spaces, UTF-8), so the signing time and the
bundle's place are signed too. Ed25519 (RFC 8032) signatures are
deterministic: the same key and bytes always give the same signature.

The private key stays outside the archive: :func:`load_signer` reads it from
the path in ``output.signing_key`` or in the ``SITREP_SIGNING_KEY``
environment variable, and nothing in this module writes, prints or logs it.
The ``cryptography`` package is imported only when a key is used.
"""

from __future__ import annotations

import base64
import dataclasses
import datetime as dt
import hashlib
import json
import os
import stat
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sitrep.errors import ConfigError, DeliveryError

if TYPE_CHECKING:
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

__all__ = [
    "ALGORITHM",
    "KEY_ENV",
    "PRIVATE_KEY_FILE",
    "PUBLIC_KEY_FILE",
    "SIGNATURE_FILE",
    "KeyFiles",
    "PublicKey",
    "SignatureCheck",
    "Signer",
    "check_signature",
    "generate_keys",
    "load_public_key",
    "load_public_keys",
    "load_signer",
    "signature_document",
    "signing_key_path",
]

ALGORITHM = "Ed25519"
SIGNATURE_FILE = "manifest.sig"
"""Name of the signature document inside a bundle."""
KEY_ENV = "SITREP_SIGNING_KEY"
"""Environment variable holding the path of the private key; it overrides ``output.signing_key``."""
PRIVATE_KEY_FILE = "sitrep-signing-key.pem"
PUBLIC_KEY_FILE = "sitrep-signing-key.pub.pem"
_SIGNED_FILE = "manifest-sha256.txt"


@dataclasses.dataclass(frozen=True)
class PublicKey:
    """A raw 32-byte Ed25519 public key and where it came from."""

    raw: bytes
    source: str = ""

    @property
    def fingerprint(self) -> str:
        """``sha256:<hex>`` of the raw key bytes: what people compare by eye."""
        return fingerprint(self.raw)


@dataclasses.dataclass(frozen=True)
class Signer:
    """A loaded private key. ``repr`` never shows the key."""

    _key: Ed25519PrivateKey = dataclasses.field(repr=False)
    public: PublicKey

    def sign(self, message: bytes) -> bytes:
        return self._key.sign(message)


@dataclasses.dataclass(frozen=True)
class KeyFiles:
    """What :func:`generate_keys` wrote."""

    private: Path
    public: Path
    fingerprint: str


@dataclasses.dataclass(frozen=True)
class SignatureCheck:
    """Outcome of :func:`check_signature`.

    ``status``: ``"valid"`` (good signature by a trusted key), ``"valid-untrusted"``
    (good signature, but no trusted key was given to compare with),
    ``"untrusted-key"`` (good signature by a key that is not trusted) or
    ``"invalid"`` (the document is unreadable, names other bytes, or the
    signature does not match).
    """

    status: str
    fingerprint: str
    signed_at: str
    problems: tuple[str, ...] = ()

    @property
    def ok(self) -> bool:
        return self.status in ("valid", "valid-untrusted")


def fingerprint(raw: bytes) -> str:
    return "sha256:" + hashlib.sha256(raw).hexdigest()


# --------------------------------------------------------------------------- keys


def generate_keys(out_dir: Path) -> KeyFiles:
    """Write a new Ed25519 key pair into ``out_dir`` (created 0700 when missing).

    The private key is PKCS#8 PEM with mode 0600, the public key
    SubjectPublicKeyInfo PEM with mode 0644; both are created exclusively, so
    an existing key is never replaced (rotate into a new folder and keep the
    old public key among the trusted keys).

    Raises
    ------
    DeliveryError
        A key file exists already, or the folder cannot be written.
    """
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    out_dir = Path(out_dir)
    private_path, public_path = out_dir / PRIVATE_KEY_FILE, out_dir / PUBLIC_KEY_FILE
    for p in (private_path, public_path):
        if os.path.lexists(p):
            raise DeliveryError(
                f"{p} exists; a key is never overwritten. To rotate, write the new pair into "
                "another folder and keep the old public key in output.trusted_keys"
            )
    key = Ed25519PrivateKey.generate()
    private_pem = key.private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()
    )
    public = key.public_key()
    public_pem = public.public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
    )
    raw = public.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    try:
        out_dir.mkdir(mode=0o700, parents=True, exist_ok=True)
        _create(private_path, private_pem, 0o600)
        _create(public_path, public_pem, 0o644)
    except OSError as exc:
        raise DeliveryError(f"cannot write the key pair into {out_dir}: {exc}") from exc
    return KeyFiles(private=private_path, public=public_path, fingerprint=fingerprint(raw))


def _create(path: Path, data: bytes, mode: int) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0), mode)
    try:
        os.fchmod(fd, mode)  # the umask may have removed bits; never add group/other read to 0600
        os.write(fd, data)
        os.fsync(fd)
    finally:
        os.close(fd)


def signing_key_path(configured: Path | None, env: Mapping[str, str] = os.environ) -> Path | None:
    """The private key to use: ``$SITREP_SIGNING_KEY`` when set, else ``output.signing_key``."""
    from_env = env.get(KEY_ENV, "").strip()
    if from_env:
        return Path(from_env).expanduser()
    return configured


def load_signer(path: Path) -> Signer:
    """Read an unencrypted Ed25519 private key (PKCS#8 PEM, as :func:`generate_keys` writes).

    Raises
    ------
    ConfigError
        The file is missing, readable by group or others, not a PEM private
        key, encrypted, or not Ed25519. The message names the file, never its
        content.
    """
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    path = Path(path)
    where = f"signing key {path} (output.signing_key or ${KEY_ENV})"
    try:
        info = path.stat()
        data = path.read_bytes()
    except FileNotFoundError:
        raise ConfigError(
            f"{where} not found; create one with `sitrep keys init --out DIR`"
        ) from None
    except OSError as exc:
        raise ConfigError(f"cannot read {where}: {exc.strerror}") from None
    if info.st_mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise ConfigError(
            f"{where} can be read by other users (mode {stat.filemode(info.st_mode)}); "
            f"run `chmod 600 {path}`"
        )
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except TypeError:
        raise ConfigError(f"{where} is encrypted; sitrep needs an unencrypted key file") from None
    except ValueError:
        raise ConfigError(f"{where} is not a PEM private key") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise ConfigError(f"{where} is a {type(key).__name__}, not an Ed25519 key")
    raw = key.public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return Signer(key, PublicKey(raw, str(path)))


def load_public_key(path: Path) -> PublicKey:
    """Read an Ed25519 public key (SubjectPublicKeyInfo PEM).

    Raises
    ------
    ConfigError
        Missing, unreadable, not a PEM public key, or not Ed25519.
    """
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise ConfigError(f"public key {path} not found") from None
    except OSError as exc:
        raise ConfigError(f"cannot read public key {path}: {exc.strerror}") from None
    try:
        key = serialization.load_pem_public_key(data)
    except ValueError:
        if b"PRIVATE KEY" in data:
            raise ConfigError(
                f"{path} is a private key; give the public one ({PUBLIC_KEY_FILE})"
            ) from None
        raise ConfigError(f"{path} is not a PEM public key") from None
    if not isinstance(key, Ed25519PublicKey):
        raise ConfigError(f"{path} is a {type(key).__name__}, not an Ed25519 public key")
    raw = key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return PublicKey(raw, str(path))


def load_public_keys(paths: Sequence[Path]) -> tuple[PublicKey, ...]:
    return tuple(load_public_key(p) for p in paths)


# --------------------------------------------------------------------------- signatures


def _canonical(document: Mapping[str, Any]) -> bytes:
    return json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()


def signature_document(
    signer: Signer, bundle_id: str, checksums: bytes, signed_at: dt.datetime
) -> bytes:
    """The bytes of ``manifest.sig`` for a bundle whose checksum list is ``checksums``.

    ``bundle_id`` is the bundle's place in its jurisdiction (``2026-W47/v1``).
    """
    when = signed_at.astimezone(dt.UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    body: dict[str, Any] = {
        "algorithm": ALGORITHM,
        "public_key": base64.b64encode(signer.public.raw).decode("ascii"),
        "fingerprint": signer.public.fingerprint,
        "signed_at": when,
        "signed": {
            "bundle": bundle_id,
            "file": _SIGNED_FILE,
            "sha256": hashlib.sha256(checksums).hexdigest(),
        },
    }
    body["signature"] = base64.b64encode(signer.sign(_canonical(body))).decode("ascii")
    return (json.dumps(body, indent=2, sort_keys=True) + "\n").encode("utf-8")


def check_signature(
    document: bytes,
    checksums: bytes,
    bundle_id: str,
    trusted: Sequence[PublicKey] = (),
) -> SignatureCheck:
    """Check a ``manifest.sig`` document against the bundle's checksum list.

    The signature is checked with the public key recorded in the document; the
    key is then compared with ``trusted`` (by raw bytes). With no trusted keys
    the result is ``"valid-untrusted"`` at best: the bundle is intact and
    self-consistent, but anyone with write access could have re-signed it
    with a key of their own.
    """
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    def invalid(problem: str, fp: str = "", when: str = "") -> SignatureCheck:
        return SignatureCheck("invalid", fp, when, (f"{SIGNATURE_FILE}: {problem}",))

    try:
        body = json.loads(document.decode("utf-8"))
        if not isinstance(body, dict):
            raise TypeError("not a JSON object")
        signature = base64.b64decode(str(body.pop("signature")), validate=True)
        raw = base64.b64decode(str(body["public_key"]), validate=True)
        signed = body["signed"]
        when = str(body.get("signed_at", ""))
        algorithm = body.get("algorithm")
        if not isinstance(signed, dict):
            raise TypeError("'signed' is not an object")
    except (UnicodeDecodeError, ValueError, KeyError, TypeError) as exc:
        return invalid(f"cannot be read as a signature document ({exc})")
    fp = fingerprint(raw)
    if algorithm != ALGORITHM:
        return invalid(f"algorithm is {algorithm!r}, expected {ALGORITHM!r}", fp, when)
    if body.get("fingerprint") != fp:
        return invalid("the recorded fingerprint does not match the recorded key", fp, when)
    try:
        Ed25519PublicKey.from_public_bytes(raw).verify(signature, _canonical(body))
    except (InvalidSignature, ValueError):
        return invalid("the signature does not match (the document was changed)", fp, when)
    digest = hashlib.sha256(checksums).hexdigest()
    if signed.get("file") != _SIGNED_FILE or signed.get("sha256") != digest:
        return invalid(
            f"it signs a {_SIGNED_FILE} with SHA-256 {signed.get('sha256')}, the bundle's is {digest}",
            fp,
            when,
        )
    if signed.get("bundle") != bundle_id:
        return invalid(
            f"it was made for bundle {signed.get('bundle')}, but sits in {bundle_id}", fp, when
        )
    if not trusted:
        return SignatureCheck("valid-untrusted", fp, when)
    if any(k.raw == raw for k in trusted):
        return SignatureCheck("valid", fp, when)
    return SignatureCheck(
        "untrusted-key",
        fp,
        when,
        (f"{SIGNATURE_FILE}: signed with key {fp}, which is not among the trusted keys",),
    )
