"""Secrets of accounts: Argon2 password hashes, API token strings and their digests.

Pure functions, no database: the users and logins services store what these make, and
:mod:`server.auth` checks what a request brings against it.
"""

from __future__ import annotations

import hashlib
import secrets

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError

__all__ = ["TOKEN_PREFIX", "hash_password", "verify_password", "password_fingerprint", "new_token", "token_digest"]

TOKEN_PREFIX = "rsk_"
_hasher = PasswordHasher()


def hash_password(password: str) -> str:
    """Argon2id hash (argon2-cffi defaults, RFC 9106 parameters)."""
    return _hasher.hash(password)


def verify_password(password_hash: str | None, password: str) -> bool:
    if not password_hash:
        return False
    try:
        return _hasher.verify(password_hash, password)
    except (VerificationError, InvalidHashError):
        return False


def password_fingerprint(password_hash: str | None) -> str:
    """A short digest of the stored hash: a session ends when its user's password changes."""
    return hashlib.sha256((password_hash or "").encode()).hexdigest()[:16]


def new_token() -> str:
    """A fresh API token (shown once to its owner; only its digest is stored)."""
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def token_digest(token: str) -> str:
    """SHA-256 of a token: tokens are long random strings, so a fast hash is enough."""
    return hashlib.sha256(token.encode()).hexdigest()
