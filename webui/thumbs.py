"""Browser thumbnails of micrographs, derived by the Vault and cached here by content.

Originals are never altered; a thumbnail is a PNG made from them on demand and
kept in a least-recently-used cache keyed by the original's SHA-256 and the size,
so identical bytes attached twice share one entry.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Callable


class ThumbnailCache:
    """LRU of PNG bytes bounded by their total size."""

    def __init__(self, max_bytes: int):
        self.max_bytes = int(max_bytes)
        self._items: OrderedDict[tuple[str, int], bytes] = OrderedDict()
        self._sha_of_image: dict[int, str] = {}
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def sha_of(self, image_id: int, lookup: Callable[[int], str]) -> str:
        """The SHA-256 of an image's original (an image's bytes never change, so this is kept)."""
        with self._lock:
            known = self._sha_of_image.get(image_id)
        if known is None:
            known = lookup(image_id)
            with self._lock:
                if len(self._sha_of_image) > 100_000:
                    self._sha_of_image.clear()
                self._sha_of_image[image_id] = known
        return known

    def get(self, sha256: str, size: int, make: Callable[[], bytes]) -> bytes:
        key = (sha256, int(size))
        with self._lock:
            png = self._items.get(key)
            if png is not None:
                self._items.move_to_end(key)
                self.hits += 1
                return png
        png = make()
        with self._lock:
            self.misses += 1
            self._items[key] = png
            total = sum(len(v) for v in self._items.values())
            while len(self._items) > 1 and total > self.max_bytes:
                _, old = self._items.popitem(last=False)
                total -= len(old)
        return png
