"""Fixtures shared by several test files."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture
def treebank_file(tmp_path):
    """Write ``content`` (str as UTF-8, or raw bytes) to ``tmp_path/name`` and return the path."""

    def write(content: str | bytes, name: str = "trees.txt") -> Path:
        path = tmp_path / name
        path.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
        return path

    return write
