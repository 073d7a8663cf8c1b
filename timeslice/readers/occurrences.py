"""Occurrence-record readers (placeholder until implemented)."""

from __future__ import annotations


def read_occurrences(path, **kwargs):  # pragma: no cover - replaced by the implementation
    raise NotImplementedError


def read_dated_records(path, **kwargs):  # pragma: no cover - replaced by the implementation
    raise NotImplementedError
