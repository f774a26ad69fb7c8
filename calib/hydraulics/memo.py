"""A small memo of answers that depend only on which links are open (and valve states).

The connectivity questions of a solve (which junctions are cut off, which zone each is in) have the
same answer for every solve with the same open links; a fit alternates between a few such sets
(tests with different closures or valve states), so the last few answers are kept, not only the
last one. Answers are copied in and out: callers may change what they get.
"""

from __future__ import annotations

import numpy as np


class Memo:
    """Up to ``size`` answers (numpy arrays) by key; the oldest is dropped first."""

    def __init__(self, size: int = 8):
        self.size = int(size)
        self._answers: dict = {}

    def get(self, key) -> np.ndarray | None:
        answer = self._answers.get(key)
        return None if answer is None else answer.copy()

    def put(self, key, answer: np.ndarray) -> np.ndarray:
        if len(self._answers) >= self.size:
            self._answers.pop(next(iter(self._answers)))
        self._answers[key] = answer.copy()
        return answer
