"""Duplicate record-id detection over a whole partition with bounded memory.

Two passes, driven by the caller::

    finder = DuplicateFinder()
    for batch in reader:                  # pass 1, file order
        finder.add(batch.column("record_id"))
    candidates = finder.finish()          # global rows that *may* be involved
    ids = <re-read the id column at `candidates` only>   # see rows_by_batch()
    duplicates = finder.confirm(candidates, ids)          # exact answer

``duplicates`` holds the global row indices (0-based, counted over all rows
passed to ``add`` in order) of every *later* occurrence of an id already
seen earlier; the first occurrence of each id is kept.  Null ids are never
reported (the caller handles them separately).

Memory
------
Pass 1 keeps only one 8-byte hash per record (a list of ``uint64`` arrays).
``finish`` concatenates and sorts one copy of them, so its transient peak is
~16 bytes per record (plus ~8 bytes per *repeated* hash value); it then
releases the per-record hashes batch by batch and keeps only the candidate
rows (row index and hash: 16 bytes per candidate, plus the 8-byte copy it
returns).  With few duplicates that is ~16 B/record at peak and ~0 after.
Hashing a batch needs temporaries of ~24 bytes per id *byte*, but the
strings are processed in slices of about ``_BYTES_PER_SLICE`` bytes, so that
part is bounded (~25 MiB) independently of the batch size.

Why two passes
--------------
64-bit hashes can collide (for 10^9 distinct ids the chance that any pair
collides is about 10^18 / 2^65 ~ 3 %), so equal hashes only nominate
candidates.  ``finish`` returns *every* row whose hash occurs more than once,
i.e. each later occurrence together with its earlier partners; ``confirm``
then compares the actual ids of those rows exactly.  Equal ids always have
equal hashes, so no true duplicate can be missed, and a collision between
distinct ids is resolved by the exact comparison, never quarantined.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

__all__ = ["NULL_HASH", "hash_ids", "DuplicateFinder", "find_duplicates"]

# --------------------------------------------------------------------------
# 64-bit mixing (uint64 arithmetic wraps modulo 2^64 by design)
# --------------------------------------------------------------------------
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)  # 2^64 / golden ratio, odd
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30, _S27, _S31 = np.uint64(30), np.uint64(27), np.uint64(31)

_SEED_BYTES = np.uint64(0x5EC0_4D1D_0000_0001)  # key space of (position, byte)
_SEED_LENGTH = np.uint64(0x5EC0_4D1D_0000_0002)  # string length
_SEED_INT = np.uint64(0x5EC0_4D1D_0000_0003)  # integer ids

#: hash reserved for null ids; a non-null id never hashes to it
NULL_HASH = np.uint64(0)
_NULL_ALIAS = np.uint64(0xFFFF_FFFF_FFFF_FFFF)  # stand-in if a value mixes to 0

_BYTES_PER_SLICE = 1 << 20


def _mix64(x: np.ndarray) -> np.ndarray:
    """splitmix64-style finaliser: a bijective avalanche of a uint64 array.

    xor-shift / odd-multiply rounds (multipliers of the widely used
    splitmix64 output function); every input bit affects every output bit.
    Works on (and returns) a fresh uint64 array.
    """
    z = np.array(x, dtype=np.uint64, copy=True)
    with np.errstate(over="ignore"):
        z ^= z >> _S30
        z *= _M1
        z ^= z >> _S27
        z *= _M2
        z ^= z >> _S31
    return z


def _byte_key_hash(key: np.ndarray) -> np.ndarray:
    """Pseudo-random 64-bit value F(key) for key = position * 256 + byte."""
    with np.errstate(over="ignore"):
        return _mix64((key.astype(np.uint64) + np.uint64(1)) * _GOLDEN ^ _SEED_BYTES)


# F for the first 256 byte positions (512 KiB), i.e. a table for simple
# tabulation hashing; longer strings fall back to evaluating F directly, which
# gives identical values.
_TABLE_KEYS = 256 * 256
_TABLE = _byte_key_hash(np.arange(_TABLE_KEYS, dtype=np.int64))


def _finalise(x: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore"):
        return _mix64(x ^ _mix64(lengths.astype(np.uint64) ^ _SEED_LENGTH))


# --------------------------------------------------------------------------
# Hashing
# --------------------------------------------------------------------------
def _hash_binary_chunk(arr: pa.Array) -> np.ndarray:
    """Hash a string/binary array (32- or 64-bit offsets) from its buffers.

    h = mix(XOR_j F(256*j + b_j)  ^  mix(len ^ seed)) over the bytes b_j of
    the value, j = 0..len-1: simple tabulation hashing over (position, byte)
    keys followed by an avalanche.  Per-string XOR reductions use
    ``np.bitwise_xor.reduceat`` on the flat byte stream.
    """
    n = len(arr)
    out = np.zeros(n, dtype=np.uint64)
    if n == 0:
        return out
    large = pa.types.is_large_string(arr.type) or pa.types.is_large_binary(arr.type)
    bufs = arr.buffers()
    offsets = np.frombuffer(bufs[1], dtype=np.int64 if large else np.int32)
    offsets = offsets[arr.offset : arr.offset + n + 1].astype(np.int64)
    lengths = np.diff(offsets)
    total = int(offsets[-1] - offsets[0])
    if total > 0:
        data = np.frombuffer(bufs[2], dtype=np.uint8)
        # split the strings into slices of at most ~_BYTES_PER_SLICE bytes
        cuts = np.searchsorted(
            offsets, offsets[0] + np.arange(_BYTES_PER_SLICE, total, _BYTES_PER_SLICE)
        )
        bounds = np.unique(np.concatenate(([0], cuts, [n])))
        for lo, hi in zip(bounds[:-1].tolist(), bounds[1:].tolist()):  # slices, not records
            b0, b1 = int(offsets[lo]), int(offsets[hi])
            if b1 == b0:
                continue
            seg_len = lengths[lo:hi]
            seg_start = offsets[lo:hi] - b0
            pos = np.arange(b1 - b0, dtype=np.int64)
            pos -= np.repeat(seg_start, seg_len)  # byte position inside its string
            key = pos * 256 + data[b0:b1]
            del pos
            if int(key.max()) < _TABLE_KEYS:
                terms = _TABLE[key]
            else:
                terms = np.empty(key.size, dtype=np.uint64)
                small = key < _TABLE_KEYS
                terms[small] = _TABLE[key[small]]
                terms[~small] = _byte_key_hash(key[~small])
            del key
            nonempty = seg_len > 0
            # reduceat over the start of each non-empty string: the segment of
            # one string runs to the start of the next non-empty one (empty
            # strings in between own no bytes)
            out[lo:hi][nonempty] = np.bitwise_xor.reduceat(terms, seg_start[nonempty])
    return _finalise(out, lengths)


def _hash_int_chunk(arr: pa.Array) -> np.ndarray:
    t = arr.type
    values = arr.fill_null(0).to_numpy(zero_copy_only=False)
    if pa.types.is_unsigned_integer(t):
        u = values.astype(np.uint64)
    else:
        u = values.astype(np.int64).view(np.uint64)
    # bijective: distinct integers never share a hash
    return _mix64(u ^ _SEED_INT)


def _hash_chunk(arr: pa.Array) -> np.ndarray:
    t = arr.type
    if pa.types.is_dictionary(t):
        # hash each distinct value once (already null-aware), then broadcast
        dict_hash = _hash_chunk(arr.dictionary)
        idx = arr.indices.fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
        if dict_hash.size == 0:
            return np.full(len(arr), NULL_HASH, dtype=np.uint64)
        h = dict_hash[idx]
        if arr.indices.null_count:
            valid = np.asarray(pc.is_valid(arr.indices).to_numpy(zero_copy_only=False), dtype=bool)
            h[~valid] = NULL_HASH
        return h
    if pa.types.is_null(t):  # an all-null column
        return np.full(len(arr), NULL_HASH, dtype=np.uint64)
    if pa.types.is_string_view(t) or pa.types.is_binary_view(t):
        large = pa.large_string() if pa.types.is_string_view(t) else pa.large_binary()
        return _hash_chunk(arr.cast(large))
    if (
        pa.types.is_string(t)
        or pa.types.is_large_string(t)
        or pa.types.is_binary(t)
        or pa.types.is_large_binary(t)
    ):
        h = _hash_binary_chunk(arr)
    elif pa.types.is_integer(t):
        h = _hash_int_chunk(arr)
    else:
        raise TypeError(
            f"record ids must be string, binary or integer, found {t} "
            "(accepted: string, large_string, string_view, binary variants, "
            "integer types, optionally dictionary-encoded; all-null columns)"
        )
    h[h == NULL_HASH] = _NULL_ALIAS
    if arr.null_count:
        valid = np.asarray(pc.is_valid(arr).to_numpy(zero_copy_only=False), dtype=bool)
        h[~valid] = NULL_HASH
    return h


def hash_ids(arr) -> np.ndarray:
    """Deterministic 64-bit hash of every id (``uint64`` array, one per row).

    ``arr`` is a ``pa.Array`` or ``pa.ChunkedArray`` of strings/binary (any
    offset width, sliced or not, dictionary-encoded or not) or integers.
    The value depends only on the id's bytes (or integer value): it is the
    same across chunks, slices, offset widths, runs and machines (pure
    uint64 arithmetic; Python's salted ``hash()`` is never used).  Null ids
    hash to ``NULL_HASH``, which no non-null id hashes to.
    """
    if isinstance(arr, pa.ChunkedArray):
        parts = [_hash_chunk(c) for c in arr.chunks]
        return np.concatenate(parts) if parts else np.zeros(0, dtype=np.uint64)
    if isinstance(arr, pa.Array):
        return _hash_chunk(arr)
    raise TypeError(f"hash_ids expects a pyarrow Array or ChunkedArray, got {type(arr).__name__}")


# --------------------------------------------------------------------------
# Duplicate detection
# --------------------------------------------------------------------------
def _as_single_array(ids) -> pa.Array:
    if isinstance(ids, (list, tuple)):
        if not ids:
            raise ValueError("no ids given")
        ids = pa.chunked_array(ids)
    if isinstance(ids, pa.ChunkedArray):
        ids = ids.combine_chunks() if ids.num_chunks else pa.array([], type=ids.type)
    if not isinstance(ids, pa.Array):
        raise TypeError(f"ids must be pyarrow arrays, got {type(ids).__name__}")
    t = ids.type
    if pa.types.is_dictionary(t):
        ids = ids.dictionary_decode()
        t = ids.type
    if pa.types.is_string_view(t):
        ids = ids.cast(pa.large_string())
    elif pa.types.is_binary_view(t):
        ids = ids.cast(pa.large_binary())
    return ids


class DuplicateFinder:
    """Find later occurrences of repeated record ids across a partition.

    Protocol: ``add()`` every batch in file order, then ``finish()`` once,
    then ``confirm()`` once with the ids of exactly the rows ``finish()``
    returned.  See the module docstring for the memory bound.
    """

    def __init__(self) -> None:
        self._hashes: list[np.ndarray] | None = []
        self._batch_starts: list[int] = []
        self._n_rows = 0
        self._cand_rows: np.ndarray | None = None
        self._cand_hashes: np.ndarray | None = None

    @property
    def n_rows(self) -> int:
        """Rows added so far."""
        return self._n_rows

    @property
    def batch_starts(self) -> np.ndarray:
        """Global row index of the first row of every added batch."""
        return np.asarray(self._batch_starts, dtype=np.int64)

    def add(self, batch_ids) -> None:
        """Hash one batch of ids (``pa.Array``/``pa.ChunkedArray``); keeps 8 B/row."""
        if self._hashes is None:
            raise RuntimeError("add() after finish()")
        h = hash_ids(batch_ids)
        self._batch_starts.append(self._n_rows)
        self._hashes.append(h)
        self._n_rows += h.size

    def finish(self) -> np.ndarray:
        """Candidate rows: every non-null row whose hash occurs more than once.

        Returns a sorted ``int64`` array of global row indices.  It contains
        each later occurrence *and* its earlier partner(s); pass the ids of
        these rows to :meth:`confirm` for the exact answer.  The per-row
        hashes are released afterwards.
        """
        if self._hashes is None:
            raise RuntimeError("finish() called twice")
        chunks = self._hashes
        if self._n_rows == 0:
            self._hashes = None
            self._cand_rows = np.zeros(0, dtype=np.int64)
            self._cand_hashes = np.zeros(0, dtype=np.uint64)
            return self._cand_rows.copy()
        # one sorted copy (peak ~16 B/row together with the kept chunks)
        s = np.concatenate(chunks)
        s.sort()
        repeated = s[1:][s[1:] == s[:-1]]
        del s
        repeated = np.unique(repeated)
        repeated = repeated[repeated != NULL_HASH]
        self._hashes = None
        rows, hashes = [], []
        for k, start in enumerate(self._batch_starts):  # loop over batches
            h = chunks[k]
            chunks[k] = None  # release each batch's hashes once scanned
            if repeated.size == 0:
                continue
            i = np.searchsorted(repeated, h)
            np.minimum(i, repeated.size - 1, out=i)
            hit = repeated[i] == h
            rows.append(np.flatnonzero(hit) + start)
            hashes.append(h[hit])
        del chunks, repeated
        if rows:
            self._cand_rows = np.concatenate(rows).astype(np.int64)
            self._cand_hashes = np.concatenate(hashes)
        else:
            self._cand_rows = np.zeros(0, dtype=np.int64)
            self._cand_hashes = np.zeros(0, dtype=np.uint64)
        return self._cand_rows.copy()

    def rows_by_batch(self, rows) -> list[tuple[int, np.ndarray]]:
        """Split global row indices into ``(batch_number, local_indices)``.

        Helps the caller re-read only the candidate rows batch by batch
        (e.g. ``batch.column(...).take(local_indices)``).  Only batches that
        contain at least one of ``rows`` are listed, in ascending order.
        """
        rows = np.asarray(rows, dtype=np.int64)
        if rows.size and (rows.min() < 0 or rows.max() >= self._n_rows):
            raise IndexError("row index outside the rows added")
        starts = self.batch_starts
        batch = np.searchsorted(starts, rows, side="right") - 1
        order = np.argsort(batch, kind="stable")
        batch, rows = batch[order], rows[order]
        present, first = np.unique(batch, return_index=True)
        bounds = np.append(first, rows.size)
        return [
            (int(b), rows[lo:hi] - starts[b])
            for b, lo, hi in zip(present.tolist(), bounds[:-1].tolist(), bounds[1:].tolist())
        ]

    def confirm(self, candidate_rows, ids) -> np.ndarray:
        """Exact duplicate rows among the candidates (sorted ``int64``).

        ``candidate_rows``: the rows returned by :meth:`finish` (any order);
        ``ids``: their ids in the same order, as a ``pa.Array``,
        ``pa.ChunkedArray`` or list of arrays.  Ids are compared exactly; of
        each distinct id the lowest row is the first occurrence and every
        other row carrying it is returned.  Raises ``ValueError`` if the
        rows are not exactly the candidates or if the ids do not hash to the
        values seen in pass 1 (i.e. the wrong rows were re-read).
        """
        if self._cand_rows is None:
            raise RuntimeError("confirm() before finish()")
        rows = np.asarray(candidate_rows, dtype=np.int64).reshape(-1)
        if rows.size == 0 and self._cand_rows.size == 0:
            return np.zeros(0, dtype=np.int64)
        ids = _as_single_array(ids)
        if len(ids) != rows.size:
            raise ValueError(f"{rows.size} candidate rows but {len(ids)} ids")
        order = np.argsort(rows, kind="stable")
        rows = rows[order]
        if not np.array_equal(rows, self._cand_rows):
            raise ValueError("confirm() needs the ids of exactly the rows finish() returned")
        ids = ids.take(pa.array(order))
        if not np.array_equal(hash_ids(ids), self._cand_hashes):
            raise ValueError(
                "ids do not match the rows hashed in pass 1 (were the right rows re-read?)"
            )
        # exact grouping: integer code per distinct id value, then the first
        # (lowest-row) position of each code is kept, the rest are duplicates
        code = pc.index_in(ids, value_set=pc.unique(ids)).to_numpy(zero_copy_only=False)
        _, first = np.unique(code, return_index=True)
        later = np.ones(rows.size, dtype=bool)
        later[first] = False
        return rows[later]


def find_duplicates(ids) -> np.ndarray:
    """Both passes over an in-memory id column: sorted later-occurrence rows."""
    finder = DuplicateFinder()
    chunks = ids.chunks if isinstance(ids, pa.ChunkedArray) else [ids]
    for c in chunks:
        finder.add(c)
    cand = finder.finish()
    if cand.size == 0:
        return cand
    flat = ids.combine_chunks() if isinstance(ids, pa.ChunkedArray) else ids
    return finder.confirm(cand, flat.take(pa.array(cand)))
