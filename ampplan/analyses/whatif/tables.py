"""Compact per-sample tables for long runs: numbers as float arrays, words as codes.

A tolerance run of a million samples keeps every result address of every sample. Words
(``region``, ``limiting_stage``, ``status``) repeat a handful of values, so they are kept as
one-byte codes into a short vocabulary (:class:`Words`) and decoded on access; the arrays are
allocated once for the whole run and filled chunk by chunk (:class:`TableBuilder`), so the peak
memory is the final table plus one chunk.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Words", "TableBuilder", "equals"]


@dataclass(frozen=True, eq=False)
class Words:
    """A str column as codes: ``vocabulary[codes]`` is the array of words."""
    vocabulary: tuple
    codes: np.ndarray

    @classmethod
    def encode(cls, array) -> "Words":
        vocabulary, codes = np.unique(np.asarray(array, dtype=str), return_inverse=True)
        return cls(tuple(vocabulary.tolist()), codes.astype(np.uint8))

    def decode(self) -> np.ndarray:
        return np.asarray(self.vocabulary, dtype=str)[self.codes] if self.vocabulary else np.array([], dtype=str)

    def __len__(self) -> int:
        return len(self.codes)


def equals(column, word: str) -> np.ndarray:
    """Bool array: each entry of a str column (or :class:`Words`) equals ``word``."""
    if isinstance(column, Words):
        if word not in column.vocabulary:
            return np.zeros(len(column), dtype=bool)
        return column.codes == column.vocabulary.index(word)
    return np.asarray(column) == word


class TableBuilder:
    """Fills a table of ``size`` rows from chunks (dict of column -> array), in any order."""

    def __init__(self, size: int):
        self.size = size
        self.columns: dict = {}
        self._vocabulary: dict = {}

    def put(self, start: int, chunk: dict) -> None:
        stop = start + len(next(iter(chunk.values())))
        for name, array in chunk.items():
            array = np.asarray(array)
            if array.dtype.kind in "US":
                vocabulary = self._vocabulary.setdefault(name, [])
                target = self.columns.setdefault(name, np.zeros(self.size, dtype=np.uint8))
                codes = target[start:stop]
                # The words seen so far by comparison (a handful: regions, stages, statuses), the
                # rest by sorting; sorting every chunk's strings took longer than solving its
                # statuses.
                left = np.ones(len(array), dtype=bool)
                for code, word in enumerate(vocabulary):
                    hit = array == word
                    codes[hit] = code
                    left &= ~hit
                if left.any():
                    words, inverse = np.unique(array[left], return_inverse=True)
                    for word in words.tolist():
                        if word not in vocabulary:
                            vocabulary.append(word)
                    if len(vocabulary) > 255:
                        raise ValueError(f"column {name!r} holds more than 255 distinct words")
                    codes[left] = np.array([vocabulary.index(w) for w in words.tolist()], dtype=np.uint8)[inverse]
            else:
                target = self.columns.get(name)
                if target is None:
                    target = self.columns[name] = np.empty(self.size, dtype=array.dtype)
                target[start:stop] = array

    def table(self) -> dict:
        return {name: Words(tuple(self._vocabulary[name]), column) if name in self._vocabulary else column
                for name, column in self.columns.items()}
