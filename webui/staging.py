"""Uploads held between the import preview and the commit (in memory, never on disk by name).

The bench's import is two steps: the export is read and shown, the user checks or
corrects the column mapping, then commits.  The bytes wait here under a random
token; the uploaded file name is kept only as text (the run's source name) and is
never used as a path.  Old and excess uploads are dropped first; a dropped token
makes the form ask for the file again.
"""

from __future__ import annotations

import re
import secrets
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass

TOKEN_PATTERN = re.compile(r"^[A-Za-z0-9_-]{16,64}$")


@dataclass(frozen=True)
class Staged:
    data: bytes
    name: str
    at: float


def display_name(raw: str | None, fallback: str = "upload") -> str:
    """The last component of an uploaded name, without control characters, at most 255 long.

    Browsers may send a full client path (``C:\\data\\run.csv``); only the last
    part is kept, and only as a label.
    """
    name = re.split(r"[\\/]", raw or "")[-1]
    name = "".join(ch for ch in name if ch.isprintable()).strip()
    return (name or fallback)[:255]


class UploadStage:
    """A bounded, thread-safe, in-memory store of uploads awaiting commit."""

    def __init__(self, max_bytes: int, max_age_s: float):
        self.max_bytes, self.max_age_s = int(max_bytes), float(max_age_s)
        self._items: OrderedDict[str, Staged] = OrderedDict()
        self._lock = threading.Lock()

    def put(self, data: bytes, name: str) -> str:
        token = secrets.token_urlsafe(18)
        with self._lock:
            self._items[token] = Staged(bytes(data), display_name(name), time.monotonic())
            self._prune()
        return token

    def get(self, token: str | None) -> Staged | None:
        if not token or not TOKEN_PATTERN.match(token):
            return None
        with self._lock:
            self._prune()
            return self._items.get(token)

    def drop(self, token: str | None) -> None:
        with self._lock:
            self._items.pop(token or "", None)

    def _prune(self) -> None:
        now = time.monotonic()
        for token in [t for t, s in self._items.items() if now - s.at > self.max_age_s]:
            del self._items[token]
        total = sum(len(s.data) for s in self._items.values())
        while self._items and total > self.max_bytes:
            _, oldest = self._items.popitem(last=False)
            total -= len(oldest.data)
