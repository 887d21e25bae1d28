"""Repeated study ids and repeated (patient, date) visits, found on integer keys.

An id column becomes one integer per row (:func:`id_keys`), equal exactly where the ids are equal:

- ids read as whole numbers (pandas ``Int64``, ``cells.parse_ids``) are their own keys;
- Arrow text whose present cells all have one byte length (the usual accession or record number:
  ``ST-0000001``, ``000123456``) is packed, with no hash: each byte position whose value varies
  becomes one digit of a mixed-radix number, its radix the span of byte values seen there. For
  strings of one length, equal numbers are equal bytes, so the packing is one-to-one (leading
  zeros are bytes like any other: ``0042`` and ``042`` differ in length and are never compared);
- any other column is factorized (one hash).

Repeated keys are then found in one pass where they are in order (a list sorted by id), by a
count where their span is small, else by pandas' hash table of integers (on the rows that share a
bucket of a cheap hash with another row only). Measured on 10^6 text
ids on 2 cores: packing about 15 ms, against about 100-190 ms for Arrow's or pandas' hash.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa

from wallstress.prepare.cells import text_buffers

# keys (and pair keys) stay below this, so that products and sums of them fit in an int64
KEY_LIMIT = 2**62
# a count (np.bincount) is used where the keys span at most this many times the rows
COUNT_SPAN_PER_ROW = 4
# the most buckets (as a power of two) the cheap hash before pandas' counts into: 64 MiB of counts
MAX_BUCKET_BITS = 23


def id_keys(ids: pd.Series) -> tuple[np.ndarray, np.ndarray, int]:
    """(keys, present, span) of an id column: ``keys`` (int64, in ``[0, span)``; arbitrary where
    the id is missing) are equal where the ids are equal; ``present`` is False for missing ids."""
    present = ids.notna().to_numpy()
    if isinstance(ids.dtype, pd.Int64Dtype):
        v = ids.to_numpy(dtype="int64", na_value=0)
        if present.any():
            low, high = int(v[present].min()), int(v[present].max())
            if high - low < KEY_LIMIT:
                return np.where(present, v - low, 0), present, high - low + 1
    elif isinstance(ids.dtype, pd.StringDtype) and ids.dtype.storage == "pyarrow":
        packed = packed_text(pa.chunked_array(pa.array(ids.array)).combine_chunks(), present)
        if packed is not None:
            return packed[0], present, packed[1]
    codes, uniques = pd.factorize(ids)  # one hash; -1 for missing
    return np.maximum(codes, 0).astype(np.int64), present, max(len(uniques), 1)


def packed_text(text: pa.Array, present: np.ndarray) -> tuple[np.ndarray, int] | None:
    """Mixed-radix keys of Arrow text whose present cells have one byte length, or None."""
    if not present.any() or not (
        pa.types.is_large_string(text.type) or pa.types.is_string(text.type)
    ):
        return None
    offsets, cells = text_buffers(text)
    lengths = np.diff(offsets)
    width = int(lengths[present][0])
    # every present cell that long, and every missing one empty (Arrow allows a missing cell to
    # keep bytes: then the cells are not one after the other)
    if width == 0 or (lengths != np.where(present, width, 0)).any():
        return None
    # the present cells' bytes, one row each: missing cells take no bytes between them
    data = cells[offsets[0] : offsets[-1]]
    grid = data.reshape(-1, width)
    low, high = _column_min_max(grid)
    radix = high.astype(np.int64) - low + 1
    varying = np.flatnonzero(radix > 1)
    span = 1
    for j in varying:
        span *= int(radix[j])
    if span >= KEY_LIMIT:
        return None
    packed = np.zeros(len(grid), dtype=np.int64)
    for j in varying:  # most significant position first
        digit = grid[:, j].astype(np.int64)
        digit -= low[j]
        packed *= int(radix[j])
        packed += digit
    if present.all():
        return packed, span
    keys = np.zeros(present.size, dtype=np.int64)
    keys[present] = packed
    return keys, span


def _column_min_max(grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each column's least and greatest byte. The rows are reduced 64 at a time as one long row
    (a reduction along a short row is 30 times slower)."""
    rows, width = grid.shape
    block = 64
    whole = rows - rows % block
    blocks = grid[:whole].reshape(-1, block * width)
    low = np.vstack([blocks.min(axis=0).reshape(block, width), grid[whole:]]) if whole else grid
    high = np.vstack([blocks.max(axis=0).reshape(block, width), grid[whole:]]) if whole else grid
    return low.min(axis=0), high.max(axis=0)


def repeated(keys: np.ndarray, present: np.ndarray, span: int) -> np.ndarray:
    """True on every row whose key (a present one) is on another present row too."""
    out = np.zeros(keys.size, dtype=bool)
    if present.sum() < 2:
        return out
    k = keys if present.all() else keys[present]
    if (k[1:] >= k[:-1]).all():  # in order: a repeat is next to its twin
        same = k[1:] == k[:-1]
        hit = np.r_[same, False] | np.r_[False, same]
    elif span <= COUNT_SPAN_PER_ROW * k.size:
        hit = np.bincount(k, minlength=span)[k] > 1
    else:
        hit = _repeated_wide(k)
    if present.all():
        return hit
    out[present] = hit
    return out


def _repeated_wide(k: np.ndarray) -> np.ndarray:
    """:func:`repeated` for keys too wide to count: pandas' hash table of integers (faster than a
    sort, with few repeats or many), on the rows that share a bucket with another row only.

    Each key is hashed to one of about ``COUNT_SPAN_PER_ROW`` buckets per row (the multiplicative
    hash of Knuth, The Art of Computer Programming vol. 3, 6.4: the top bits of the key times
    2^64 / golden ratio) and the buckets counted; equal keys share a bucket, so a row alone in its
    bucket has no twin. With few repeats (a lab's list: a patient seen again on another day) about
    a fifth of the rows are left to hash, 59 -> 27 ms at 10^6 rows; when most rows share a bucket
    (a list of repeats) every row is hashed, as without the buckets. At most 2^MAX_BUCKET_BITS
    buckets (their counts take 64 MiB): beyond 2 x 10^6 rows fewer rows are left out, and past
    about 5.5 x 10^6 most rows share a bucket and all are hashed.
    """
    bits = min(max(1, int(COUNT_SPAN_PER_ROW * k.size - 1).bit_length()), MAX_BUCKET_BITS)
    bucket = (k.astype(np.uint64) * np.uint64(0x9E3779B97F4A7C15)) >> np.uint64(64 - bits)
    bucket = bucket.astype(np.intp)
    shared = np.bincount(bucket, minlength=1 << bits)[bucket] > 1
    del bucket
    if shared.mean() > 0.5:
        return pd.Series(k).duplicated(keep=False).to_numpy()
    hit = np.zeros(k.size, dtype=bool)
    rows = np.flatnonzero(shared)
    hit[rows] = pd.Series(k[rows]).duplicated(keep=False).to_numpy()
    return hit


def repeated_pairs(a: pd.Series, b: pd.Series) -> np.ndarray:
    """True on every row whose (a, b) pair, both present, appears on another row too.

    ``a`` (patient ids) becomes keys (:func:`id_keys`) and ``b``, dates, whole days; the pair
    becomes one integer (a's key times the span of days, plus the day). Rows with either missing,
    or whose ``a`` is on no other row (most of a lab's list), are left out first.
    """
    ka, have, span_a = id_keys(a)
    day, span_d = _days(b)
    have = have & (day >= 0)
    if have.sum() < 2:
        return np.zeros(len(ka), dtype=bool)
    if span_a <= COUNT_SPAN_PER_ROW * len(ka):  # a patient seen once has no repeated pair
        have &= repeated(ka, have, span_a)
    if span_a * span_d >= KEY_LIMIT:  # keys too wide to pair: renumber the patients seen twice
        ka = np.zeros(len(ka), dtype=np.int64)
        ka[have], uniques = pd.factorize(ka[have])
        span_a = max(len(uniques), 1)
    return repeated(ka * span_d + np.maximum(day, 0), have, span_a * span_d)


def _days(dates: pd.Series) -> tuple[np.ndarray, int]:
    """Each date as whole days from the earliest (-1 for missing) and the span in days (>= 1),
    when every date is at midnight (the usual list); otherwise (times of day, or not dates) the
    values are factorized: their codes and how many there are. Either way, equal codes are equal
    values."""
    if pd.api.types.is_datetime64_dtype(dates.dtype):
        v = dates.to_numpy(dtype="datetime64[ns]")
        missing = np.isnat(v)
        ns = v.view(np.int64)
        if missing.all():
            return np.full(v.size, -1, dtype=np.int64), 1
        per_day = 86_400 * 10**9
        if not (ns[~missing] % per_day).any():
            day = ns // per_day
            day -= day[~missing].min()
            day[missing] = -1
            return day, int(day.max()) + 1
    codes, uniques = pd.factorize(dates)
    return codes, max(len(uniques), 1)


def distinct_of(keys: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(codes, first): each of ``rows``' code into the distinct keys among them, numbered in
    order of first appearance, and the position in ``rows`` of each distinct key's first row."""
    k = keys[rows]
    if k.size and (k[1:] >= k[:-1]).all():  # in order: a new key starts where it changes
        new = np.r_[True, k[1:] != k[:-1]]
        return np.cumsum(new) - 1, np.flatnonzero(new)
    codes, _ = pd.factorize(k)  # integers, numbered in order of first appearance: no text hashed
    new = codes > np.r_[-1, np.maximum.accumulate(codes)[:-1]]
    return codes, np.flatnonzero(new)
