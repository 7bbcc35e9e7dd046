"""An optional signature of an export folder: HMAC-SHA256 of its manifest, with a key the user keeps.

The manifest records the SHA-256 of every file of the export, so a keyed hash of
the manifest's exact bytes covers the whole folder: change any file and its
checksum no longer matches the manifest; change the manifest to match and its
HMAC no longer matches the key. Without the key nobody can compute a matching
HMAC (RFC 2104, section 6), so a folder that verifies was written by someone
holding the key and is unchanged since. The key is a file the user keeps apart
from the folder (anyone who has it can sign); the HMAC sits in
:data:`SIGNATURE_NAME` next to the manifest.

This is a shared-secret check: the person who verifies holds the same key as
the person who signed. It says nothing about folders signed with another key
and adds nothing when the key travels with the folder, which is why a key file
inside the folder is refused.

References
----------
H. Krawczyk, M. Bellare, R. Canetti, "HMAC: Keyed-Hashing for Message
Authentication", RFC 2104 (1997). M. Nystrom, "Identifiers and Test Vectors for
HMAC-SHA-224, HMAC-SHA-256, HMAC-SHA-384, and HMAC-SHA-512", RFC 4231 (2005).
"""

from __future__ import annotations

import hashlib
import hmac
import json
from pathlib import Path

from workbench.errors import InputError
from workbench.export.model_files import MANIFEST_NAME, parse_manifest

#: the file holding the HMAC of ``manifest.json``
SIGNATURE_NAME = "manifest.hmac"
#: the algorithm, as written in the signature file
ALGORITHM = "HMAC-SHA256"
#: the shortest key accepted: RFC 2104 section 3 strongly discourages keys shorter
#: than the hash's output, 32 bytes for SHA-256
MIN_KEY_BYTES = 32
#: the longest key file read (a key is tens of bytes; this only stops a wrong file)
MAX_KEY_BYTES = 1 << 16


def manifest_hmac(key: bytes, data: bytes) -> str:
    """HMAC-SHA256 of ``data`` under ``key``, as 64 hexadecimal digits (RFC 2104, via :mod:`hmac`)."""
    return hmac.new(key, data, hashlib.sha256).hexdigest()


def read_key(path, folder=None) -> bytes:
    """The bytes of a key file (all of them, a final newline included).

    Parameters
    ----------
    path : path
        The key file.
    folder : path, optional
        The export folder: a key file inside it is refused (the key must not
        travel with what it signs).

    Raises
    ------
    InputError
        when the file is missing, unreadable, inside ``folder``, shorter than
        :data:`MIN_KEY_BYTES` or longer than :data:`MAX_KEY_BYTES`.
    """
    p = Path(path).expanduser()
    if folder is not None:
        inside = Path(folder).expanduser().resolve()
        if inside == p.resolve().parent or inside in p.resolve().parents:
            raise InputError(f"the key file {p} is inside the export folder; keep it elsewhere, "
                             "since anyone who has the folder would have the key too")
    try:
        with open(p, "rb") as fh:
            key = fh.read(MAX_KEY_BYTES + 1)
    except OSError as exc:
        raise InputError(f"cannot read the key file {p} ({exc.strerror or exc})") from None
    if len(key) > MAX_KEY_BYTES:
        raise InputError(f"the key file {p} is larger than {MAX_KEY_BYTES} bytes; "
                         "give the file holding the key")
    if len(key) < MIN_KEY_BYTES:
        raise InputError(f"the key file {p} holds {len(key)} bytes; a key needs at least "
                         f"{MIN_KEY_BYTES} (make one with: python -c \"import secrets; "
                         "print(secrets.token_hex(32))\" > FILE)")
    return key


def sign_folder(folder, key: bytes) -> Path:
    """Write :data:`SIGNATURE_NAME`: the HMAC of the folder's ``manifest.json`` bytes."""
    folder = Path(folder)
    digest = manifest_hmac(key, (folder / MANIFEST_NAME).read_bytes())
    path = folder / SIGNATURE_NAME
    path.write_text(json.dumps({"algorithm": ALGORITHM, "signs": MANIFEST_NAME,
                                "hmac": digest}, indent=2) + "\n", encoding="utf-8")
    return path


def verify_folder(folder, key: bytes) -> dict:
    """Check the folder's signature with ``key``; return the manifest it covers.

    The manifest is parsed from the very bytes that were checked, so the
    checksums used afterwards are the signed ones.

    Raises
    ------
    InputError
        when the folder has no signature, a damaged one, or one that does not
        match the key (the folder was changed, or signed with another key).
    """
    folder = Path(folder)
    sig_path, man_path = folder / SIGNATURE_NAME, folder / MANIFEST_NAME
    if not sig_path.is_file():
        raise InputError(f"{folder} is not signed (no {SIGNATURE_NAME}); only a folder "
                         "exported with a key can be checked against one")
    try:
        doc = json.loads(sig_path.read_bytes()[:4096].decode("utf-8"))
        data = man_path.read_bytes()
    except (OSError, ValueError):
        doc, data = None, None
    if not isinstance(doc, dict) or doc.get("algorithm") != ALGORITHM \
            or not isinstance(doc.get("hmac"), str) or data is None:
        raise InputError(f"{sig_path} is damaged or its manifest is unreadable; the folder "
                         "cannot be verified")
    if not hmac.compare_digest(doc["hmac"].encode("ascii", "replace"),
                               manifest_hmac(key, data).encode("ascii")):
        raise InputError(f"the signature of {folder} does not match the key: the folder was "
                         "changed after it was signed, or signed with another key; "
                         "refusing to use it")
    try:
        return parse_manifest(data)
    except ValueError as exc:  # signed, but not a manifest this program reads
        raise InputError(f"{man_path} is signed but not a workbench export manifest ({exc}); "
                         "re-export the model") from None
