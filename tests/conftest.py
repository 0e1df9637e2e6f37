"""Shared fixtures: small corpora written to temporary files."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data" / "demo"


def write(path: Path, content, mode="w") -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


@pytest.fixture
def tiny_csv(tmp_path) -> Path:
    rows = ["text,label"] + [f"ferry {i} was late,transport" for i in range(6)] + [f"bill {i} too high,billing" for i in range(6)]
    return write(tmp_path / "tiny.csv", "\n".join(rows) + "\n")


@pytest.fixture
def tiny_jsonl(tmp_path) -> Path:
    lines = [json.dumps({"text": f"meter {i} reading", "label": "meter"}) for i in range(4)]
    lines += [json.dumps({"text": f"power cut {i} tonight", "label": "outage"}) for i in range(4)]
    return write(tmp_path / "tiny.jsonl", "\n".join(lines) + "\n")
