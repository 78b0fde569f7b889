"""Compiled models kept in a worker process from chain to chain, keyed by spec-and-data digest.

Compiling is paid per chain otherwise: half a second for a 50,000 x 20 logistic regression, while
a job's chains, its retries and resumes, and later jobs fitting the same model to the same data
reach the same pool process again and again. The store's own fingerprints of the spec and of the
data (canonical-JSON SHA-256, taken at submission) make the key, so looking a model up costs
nothing per element. The cache is bounded by the memory its models hold (their arrays, counted by
CompiledModel.memory_bytes) and by a count; the least recently used model goes first.

A compiled model keeps buffers its calls overwrite, so it is lent to one chain at a time: a second
borrower of the same key while the first still holds it gets a freshly compiled model of its own,
which is then not kept.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable
from typing import Any

# Models kept per process at most, whatever their size: a guard against many tiny models whose
# Python objects the byte count does not see. Our choice; sixteen covers a job's chains many times.
MAX_MODELS = 16


class CompiledModels:
    """A bounded, least-recently-used set of compiled models, lent out one borrower at a time."""

    def __init__(self, max_bytes: int, max_models: int = MAX_MODELS):
        self.max_bytes = max_bytes
        self.max_models = max_models
        self._kept: OrderedDict[str, tuple[Any, int]] = OrderedDict()
        self._lent: set[str] = set()
        self._lock = threading.Lock()
        self.compilations = 0

    def borrow(self, key: str | None, compile_model: Callable[[], Any]) -> Any:
        """The model for key, compiled now if it is not kept or is lent out already."""
        with self._lock:
            kept = self._kept.get(key) if key is not None else None
            if kept is not None and key not in self._lent:
                self._kept.move_to_end(key)
                self._lent.add(key)
                return kept[0]
        model = compile_model()
        with self._lock:
            self.compilations += 1
            if key is not None and key not in self._lent:
                self._lent.add(key)
                self._keep(key, model)
        return model

    def give_back(self, key: str | None, model: Any) -> None:
        """End a loan; a model compiled for a second borrower is simply dropped."""
        with self._lock:
            kept = self._kept.get(key) if key is not None else None
            if kept is not None and kept[0] is model:
                self._lent.discard(key)

    def _keep(self, key: str, model: Any) -> None:
        size = int(model.memory_bytes())
        if size > self.max_bytes:
            self._lent.discard(key)  # too big to keep: lent, but forgotten on return
            return
        self._kept[key] = (model, size)
        total = sum(s for _, s in self._kept.values())
        for old in list(self._kept):
            if total <= self.max_bytes and len(self._kept) <= self.max_models:
                break
            if old in self._lent:
                continue  # a model in use stays until it is given back and ages out
            total -= self._kept.pop(old)[1]

    def __len__(self) -> int:
        return len(self._kept)

    def kept_bytes(self) -> int:
        with self._lock:
            return sum(size for _, size in self._kept.values())
