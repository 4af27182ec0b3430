"""Compact per-sample tables for long runs: numbers as float arrays, words as codes.

A tolerance run of a million samples keeps every result address of every sample. Words
(``region``, ``limiting_stage``, ``status``) repeat a handful of values, so they are kept as
one-byte codes into a short vocabulary (:class:`Words`) and decoded on access; the arrays are
allocated once for the whole run and filled chunk by chunk (:class:`TableBuilder`), so the peak
memory is the final table plus one chunk.

A run spread over forked worker processes keeps its number columns in memory shared with them
(:class:`SharedColumns`, mapped before they fork): each worker writes its chunks' numbers in
place, and only the words travel back through the pool.
"""

from __future__ import annotations

import mmap
from dataclasses import dataclass

import numpy as np

__all__ = ["Words", "TableBuilder", "SharedColumns", "equals"]


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

    def __init__(self, size: int, columns: dict | None = None):
        """``columns``: arrays of ``size`` rows to fill (by name), where given (:class:`SharedColumns`)."""
        self.size = size
        self.columns: dict = dict(columns or {})
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


class SharedColumns:
    """Number columns of ``size`` rows in one anonymous shared mapping.

    Made before worker processes fork, the mapping is theirs too: a worker writes its rows in
    place (:meth:`write`) instead of sending them back, which cost more than solving them (a chunk
    of a 3-stage plan's table is about 6 MB to pickle, pass through a pipe and unpickle). Writing
    maps the pages into the worker, so it lets go of them again after each chunk (:meth:`release`):
    the rows stay in the mapping, and a worker's resident set stays at one chunk's.

    Parameters
    ----------
    size : int
    dtypes : dict of str -> numpy dtype
        The columns (numbers and flags; words stay with :class:`TableBuilder`).
    """

    def __init__(self, size: int, dtypes: dict):
        page = mmap.PAGESIZE
        offsets, total = {}, 0
        for name, dtype in dtypes.items():
            offsets[name] = total
            total += -(-size * np.dtype(dtype).itemsize // page) * page      # each column on its own pages
        self._map = mmap.mmap(-1, max(total, page))
        self.columns = {name: np.frombuffer(self._map, dtype=dtypes[name], count=size, offset=offsets[name])
                        for name in dtypes}

    def write(self, start: int, chunk: dict) -> dict:
        """Write the rows ``start`` … of every column held here; returns the other columns."""
        rest = {}
        for name, array in chunk.items():
            target = self.columns.get(name)
            array = np.asarray(array)
            if target is None or array.dtype != target.dtype:
                rest[name] = array
            else:
                target[start:start + len(array)] = array
        return rest

    def release(self) -> None:
        """Unmap this process's pages of the mapping (their contents stay for the others)."""
        self._map.madvise(mmap.MADV_DONTNEED)
