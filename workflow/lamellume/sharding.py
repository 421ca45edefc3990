"""Stable assignment of campaign records to shards."""

from __future__ import annotations

import hashlib


def shard_of(stem: str, n_shards: int) -> int:
    """Shard index of a record from its file stem.

    The key is the case-folded stem, so two files whose names differ only in
    case land in the same shard (where the duplicate is caught). The hash is
    SHA-256, stable across Python processes and machines (unlike ``hash()``).
    """
    if n_shards < 1:
        raise ValueError("n_shards must be at least 1")
    digest = hashlib.sha256(stem.casefold().encode("utf-8", "surrogateescape")).digest()
    return int.from_bytes(digest[:8], "big") % n_shards


def shard_name(index: int) -> str:
    """Directory name of a shard: zero-padded index."""
    return f"{index:03d}"


def shard_of_file(name: str, n_shards: int) -> int:
    """Shard index of a record from its file name (``<stem>.json``)."""
    return shard_of(name.rsplit(".", 1)[0], n_shards)

