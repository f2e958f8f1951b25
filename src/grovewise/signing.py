"""A reviewer's sign-off on a review folder that cannot be altered unseen (Ed25519).

``sign_review`` records the sha256 of the files the caller names (the report, the manifest,
the decision...) in ``signature.json``, with the reviewer's public key and the time, and signs
that record with the reviewer's private key. ``check_signature`` verifies the signature and
recomputes every digest: a changed or missing file, an edited ``signature.json`` or a
signature by another key is named in a plain sentence.

The private key lives outside any review folder (``default_key_path``) and is made on first
use. The signed payload is the canonical JSON of ``{"format", "files", "public_key",
"signed_at"}`` (sorted keys, no spaces), UTF-8 encoded; anyone can check it with any Ed25519
implementation from ``signature.json`` alone.
"""

from __future__ import annotations

import base64
import binascii
import datetime as _dt
import hashlib
import json
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath, PureWindowsPath

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from .errors import SettingError
from .hashing import sha256_of
from .report.atomic import write_atomic

FORMAT = "grovewise-signature-1"
SIGNATURE_FILE = "signature.json"
KEY_FILE = "signing_key.pem"
PAYLOAD_FIELDS = ("format", "files", "public_key", "signed_at")


def default_key_path() -> Path:
    """Where the reviewer's private key lives: ``$GROVEWISE_KEY`` if set, else
    ``$XDG_CONFIG_HOME/grovewise/signing_key.pem``, else ``~/.config/grovewise/signing_key.pem``."""
    override = os.environ.get("GROVEWISE_KEY")
    if override:
        return Path(override).expanduser()
    config = os.environ.get("XDG_CONFIG_HOME")
    # the XDG rules ignore a relative XDG_CONFIG_HOME
    base = Path(config) if config and Path(config).is_absolute() else Path.home() / ".config"
    return base / "grovewise" / KEY_FILE


def load_or_create_key(path: str | os.PathLike | None = None) -> tuple[Ed25519PrivateKey, bool]:
    """The private key at ``path`` (default ``default_key_path()``), made there on first use.

    Returns ``(key, created)``. A new key is written as unencrypted PKCS8 PEM with mode 0o600
    (its folder, when made here, 0o700), atomically and never over an existing file. A key
    file that cannot be read or is not an Ed25519 key raises ``SettingError``.
    """
    path = Path(path) if path is not None else default_key_path()
    if not path.exists():
        key = Ed25519PrivateKey.generate()
        if _create_key_file(path, key):
            return key, True
        # another process made the key between our look and our write: use theirs
    return _read_key(path), False


def public_key_text(key: Ed25519PrivateKey | Ed25519PublicKey) -> str:
    """The raw 32-byte Ed25519 public key of ``key``, base64."""
    public = key.public_key() if isinstance(key, Ed25519PrivateKey) else key
    raw = public.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return base64.b64encode(raw).decode("ascii")


def key_fingerprint(public: Ed25519PrivateKey | Ed25519PublicKey | str) -> str:
    """A short name of a public key: the first 16 hex digits of the sha256 of its raw bytes.

    ``public`` is a key or the base64 text of ``public_key_text``."""
    text = public if isinstance(public, str) else public_key_text(public)
    return hashlib.sha256(_public_bytes(text)).hexdigest()[:16]


def file_digests(folder: str | os.PathLike, names) -> dict[str, str]:
    """``{name: sha256 hex}`` of each file, names relative to ``folder`` (as ``a/b.json``).

    A missing or unreadable file, or a name outside the folder, raises ``SettingError``."""
    folder = Path(folder)
    digests = {}
    for name in names:
        name = _relative_name(name)
        target = folder / name
        if not target.is_file():
            raise SettingError(f"Cannot sign {name}: there is no such file in {folder}.")
        try:
            digests[name] = sha256_of(target)
        except OSError as exc:
            raise SettingError(f"Cannot read {target} to sign it ({exc.strerror or exc}); "
                               "check its permissions.") from exc
    return digests


def sign_review(folder: str | os.PathLike, files, key: Ed25519PrivateKey | None = None) -> dict:
    """Sign ``files`` of ``folder`` and write ``folder/signature.json``; returns its content.

    ``key`` defaults to the reviewer's key (``load_or_create_key()``), which must not lie
    inside ``folder``. The record holds the payload fields and ``signature`` (base64)."""
    folder = Path(folder)
    if not folder.is_dir():
        raise SettingError(f"Cannot sign {folder}: it is not a folder.")
    if key is None:
        key_path = default_key_path()
        if key_path.resolve().is_relative_to(folder.resolve()):
            raise SettingError(f"The signing key {key_path} lies inside the review folder "
                               f"{folder}; keep it elsewhere (set GROVEWISE_KEY to its path).")
        key, _ = load_or_create_key(key_path)
    elif not isinstance(key, Ed25519PrivateKey):
        raise SettingError("A review is signed with an Ed25519 private key, "
                           f"not {type(key).__name__}.")
    names = list(files)
    if not names:
        raise SettingError("Name at least one file of the review to sign.")
    if any(_relative_name(name) == SIGNATURE_FILE for name in names):
        raise SettingError(f"{SIGNATURE_FILE} holds the signature and cannot be one of "
                           "the signed files.")
    payload = {
        "format": FORMAT,
        "files": file_digests(folder, names),
        "public_key": public_key_text(key),
        "signed_at": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
    }
    signature = base64.b64encode(key.sign(canonical_payload(payload))).decode("ascii")
    record = dict(payload, signature=signature)
    write_atomic(folder / SIGNATURE_FILE, json.dumps(record, indent=2, sort_keys=True) + "\n")
    return record


def canonical_payload(record: dict) -> bytes:
    """The bytes that are signed: the payload fields of ``record`` as canonical JSON."""
    payload = {name: record[name] for name in PAYLOAD_FIELDS}
    return json.dumps(payload, sort_keys=True, separators=(",", ":")).encode("utf-8")


@dataclass
class SignatureCheck:
    """The outcome of ``check_signature``: ``ok`` when the signature verifies and every
    signed file is unchanged; ``problems`` holds one sentence per finding."""

    ok: bool
    problems: list[str] = field(default_factory=list)
    signed_files: list[str] = field(default_factory=list)
    public_key: str | None = None
    fingerprint: str | None = None
    signed_at: str | None = None

    def text(self) -> str:
        """One plain line per finding (one line saying all is well when ``ok``)."""
        if self.ok:
            count = len(self.signed_files)
            return (f"signature verifies: {count} signed file{'s' if count != 1 else ''} unchanged "
                    f"(key {self.fingerprint}, signed at {self.signed_at})")
        return "\n".join(self.problems)


def check_signature(folder: str | os.PathLike,
                    expected_public_key: Ed25519PublicKey | Ed25519PrivateKey | str | None = None
                    ) -> SignatureCheck:
    """Verify ``folder/signature.json`` and every file it signed; never raises on a damaged file.

    ``expected_public_key`` (a key or its base64 text), when given, must be the key recorded."""
    folder = Path(folder)
    check = SignatureCheck(ok=False)
    record = _read_record(folder / SIGNATURE_FILE, check.problems)
    if record is None:
        return check
    files = record["files"]
    check.signed_files = sorted(files)
    check.public_key, check.signed_at = record["public_key"], record["signed_at"]
    check.fingerprint = key_fingerprint(check.public_key)

    if expected_public_key is not None:
        expected = expected_public_key if isinstance(expected_public_key, str) \
            else public_key_text(expected_public_key)
        if expected != check.public_key:
            check.problems.append(
                f"signed with another key (fingerprint {check.fingerprint}, "
                f"not the expected {_safe_fingerprint(expected)})")
    try:
        public = Ed25519PublicKey.from_public_bytes(_public_bytes(check.public_key))
        public.verify(base64.b64decode(record["signature"]), canonical_payload(record))
    except InvalidSignature:
        check.problems.append("signature does not verify with the public key recorded "
                              f"({SIGNATURE_FILE} was edited after signing)")
    for name in check.signed_files:
        target = folder / name
        if not target.is_file():
            check.problems.append(
                f"{name} is missing (it was signed but is no longer in the folder)")
            continue
        try:
            digest = sha256_of(target)
        except OSError as exc:
            check.problems.append(f"{name} cannot be read ({exc.strerror or exc})")
            continue
        if digest != files[name]:
            check.problems.append(f"{name} changed after signing (sha256 differs)")
    check.ok = not check.problems
    return check


def _read_record(path: Path, problems: list[str]) -> dict | None:
    """The record in ``signature.json`` with every field well formed, or None (and why)."""
    if not path.is_file():
        problems.append(f"no {SIGNATURE_FILE}: the review was not signed")
        return None
    damaged = f"{SIGNATURE_FILE} is damaged:"
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        problems.append(f"{SIGNATURE_FILE} cannot be read ({exc.strerror or exc})")
        return None
    except UnicodeDecodeError:
        problems.append(f"{damaged} it is not UTF-8 text")
        return None
    except json.JSONDecodeError as exc:
        problems.append(f"{damaged} it is not valid JSON (line {exc.lineno}, column {exc.colno})")
        return None
    except RecursionError:
        problems.append(f"{damaged} it is not a signature record (nested too deeply)")
        return None
    if not isinstance(record, dict):
        problems.append(f"{damaged} it does not hold a signature record")
        return None
    missing = [name for name in (*PAYLOAD_FIELDS, "signature") if name not in record]
    if missing:
        problems.append(f"{damaged} it lacks {', '.join(missing)}")
        return None
    if record["format"] != FORMAT:
        problems.append(f"{SIGNATURE_FILE} has format {record['format']!r}, not {FORMAT!r}; "
                        "this version of Grovewise cannot check it")
        return None
    extra = sorted(set(record) - {*PAYLOAD_FIELDS, "signature"})
    if extra:
        problems.append(f"{SIGNATURE_FILE} holds fields the signature does not cover: "
                        f"{', '.join(extra)}")
    files = record["files"]
    if not isinstance(files, dict) or not files or not all(
            isinstance(k, str) and isinstance(v, str) for k, v in files.items()):
        problems.append(f"{damaged} its list of signed files is not a map of names to sha256")
        return None
    outside = [name for name in files if not _is_relative_name(name)]
    if outside:
        problems.append(f"{damaged} it names files outside the review folder: {', '.join(outside)}")
        return None
    if not isinstance(record["signed_at"], str):
        problems.append(f"{damaged} its signing time is not a text")
        return None
    try:
        _public_bytes(record["public_key"])
    except ValueError:
        problems.append(f"{damaged} its public key is not a base64 Ed25519 key (32 bytes)")
        return None
    try:
        signature = _b64(record["signature"])
    except ValueError:
        signature = b""
    if len(signature) != 64:
        problems.append(f"{damaged} its signature is not a base64 Ed25519 signature (64 bytes)")
        return None
    return record


def _b64(text) -> bytes:
    if not isinstance(text, str):
        raise ValueError("not a text")
    try:
        return base64.b64decode(text, validate=True)
    except (binascii.Error, ValueError) as exc:
        raise ValueError(str(exc)) from exc


def _public_bytes(text) -> bytes:
    raw = _b64(text)
    if len(raw) != 32:
        raise ValueError("an Ed25519 public key has 32 bytes")
    return raw


def _safe_fingerprint(text: str) -> str:
    try:
        return key_fingerprint(text)
    except ValueError:
        return "key (not a valid Ed25519 public key)"


def _relative_name(name) -> str:
    """``name`` as a POSIX path relative to the review folder; SettingError if it leaves it."""
    text = Path(name).as_posix()
    if not _is_relative_name(text):
        raise SettingError(f"Cannot sign {name}: name a file inside the review folder, "
                           "relative to it (as report.pdf or review/decision.json).")
    return text


def _is_relative_name(text: str) -> bool:
    # read both ways, so that a recorded name cannot leave the folder on Windows either
    posix, windows = PurePosixPath(text), PureWindowsPath(text)
    return (text not in ("", ".") and not posix.is_absolute() and not windows.anchor
            and ".." not in posix.parts and ".." not in windows.parts)


def _read_key(path: Path) -> Ed25519PrivateKey:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise SettingError(f"Cannot read the signing key {path} ({exc.strerror or exc}); check its "
                           "permissions, or set GROVEWISE_KEY to another key file.") from exc
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except (ValueError, TypeError) as exc:
        key = None
        reason = ("it is encrypted" if isinstance(exc, TypeError)
                  else "it is damaged or not a PEM key")
    else:
        reason = f"it holds a {type(key).__name__}"
    if not isinstance(key, Ed25519PrivateKey):
        raise SettingError(f"The signing key {path} is not an unencrypted Ed25519 private key "
                           f"({reason}). Restore it from a backup, or move it away so a new key is "
                           "made (reviews signed before then will show another key).")
    return key


def _create_key_file(path: Path, key: Ed25519PrivateKey) -> bool:
    """Write ``key`` to ``path`` (mode 0o600) unless a file appeared there; True if written."""
    folder = path.parent
    try:
        folder.mkdir(parents=True, mode=0o700)
        os.chmod(folder, 0o700)  # whatever the umask
    except FileExistsError:
        pass
    except OSError as exc:
        raise SettingError(f"Cannot make the folder {folder} for the signing key "
                           f"({exc.strerror or exc}); set GROVEWISE_KEY to a writable path.") from exc
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    try:
        fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=folder)
    except OSError as exc:
        raise SettingError(f"Cannot write the signing key {path} ({exc.strerror or exc}); "
                           "set GROVEWISE_KEY to a writable path.") from exc
    temp = Path(name)
    try:
        with os.fdopen(fd, "wb") as handle:
            os.chmod(temp, 0o600)  # mkstemp's mode already; said here as the rule
            handle.write(pem)
            handle.flush()
            os.fsync(handle.fileno())
        try:
            os.link(temp, path)  # fails if the key exists: an existing key is never replaced
        except FileExistsError:
            return False
        except OSError:  # a file system without hard links
            if path.exists():
                return False
            os.replace(temp, path)
    finally:
        temp.unlink(missing_ok=True)
    if os.name == "posix":
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    return True


def written_review_files(folder) -> list[str]:
    """The files a written review's signature covers: the manifest, the reports and every
    file of the saved review (which holds the recorded decision), as names in ``folder``."""
    folder = Path(folder)
    if not (folder / "manifest.json").is_file():
        raise SettingError(f"{folder} is not a written review folder (no manifest.json); give "
                           "the --out folder of `grovewise review`.")
    names = [n for n in ("manifest.json", "report.html", "report.pdf") if (folder / n).is_file()]
    from .batch import SAVED_REVIEW

    saved = folder / SAVED_REVIEW
    if saved.is_dir():
        names += sorted(p.relative_to(folder).as_posix() for p in saved.rglob("*") if p.is_file())
    return names


def is_signed(folder) -> bool:
    return (Path(folder) / SIGNATURE_FILE).is_file()
