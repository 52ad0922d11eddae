"""The integrity chain of a session's steps (the trail branch's export module will replace this file).

``step_digest`` is SHA-256 over the canonical JSON of a step without its digest, chained to the
previous step's digest, as agreed between the session and the export.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from typing import Any

from assistant.record import Step

_STEP_TAG = "ohmtrail-step-1"


def _prune(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _prune(v) for k, v in value.items() if v is not None and v != []}
    if isinstance(value, (list, tuple)):
        return [_prune(v) for v in value]
    return value


def step_digest(previous_digest: str | None, step: Step) -> str:
    """SHA-256 hex of a step (its ``digest`` left out) chained to the previous digest (None first)."""
    body = {k: v for k, v in step.model_dump(mode="json").items() if k != "digest"}
    payload = {"tag": _STEP_TAG, "payload": {"previous": previous_digest, "step": body}}
    text = json.dumps(_prune(payload), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
