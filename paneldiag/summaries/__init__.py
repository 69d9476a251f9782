"""One pass over units, producing summaries that add up across chunks of units.

A summary kind is a class with ``from_chunk(chunk)`` and ``merge(other)``. Because
every kind merges, the same code serves one chunk, many chunks of a file larger than
memory, or partitions summarised by separate workers and merged by a driver. Each
unit also belongs to one of ``n_replicates`` replicate groups fixed by a hash of its
id, so kinds can keep per-group copies for delete-a-group jackknife errors.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np
import pandas as pd

from paneldiag.ahead import share
from paneldiag.panel import Panel

CHUNK_UNITS = 1 << 18
CHUNKS_AT_ONCE = 4   # chunks summarised before their summaries are merged (a few per thread)
N_REPLICATES = 20
HASHED_AT_ONCE = 1 << 20   # unit ids turned to text and hashed at a time


@dataclass(frozen=True)
class Chunk:
    """A block of consecutive units of one measure."""

    values: np.ndarray          # (n, T), NaN = missing
    weights: np.ndarray | None  # (n,) or None
    replicate: np.ndarray       # (n,) replicate group 0..K-1
    times: np.ndarray           # (T,) wave times
    n_replicates: int


def replicate_groups(unit_ids: np.ndarray, n_replicates: int = N_REPLICATES) -> np.ndarray:
    """Replicate group of each unit from a fixed-key hash of its id (deterministic).

    The groups of the last id array seen are kept (read-only), since every measure and
    several sections of one screen ask for them.
    """
    for ref, k, groups in _LAST_GROUPS:
        if k == n_replicates and ref() is unit_ids:
            return groups
    ids = np.asarray(unit_ids)
    if ids.dtype.kind == "i":  # Arrow writes integers as text as str() does, but faster
        import pyarrow as pa

        def as_text(block):
            return pa.array(block).cast(pa.string()).to_numpy(zero_copy_only=False)
    else:
        def as_text(block):
            return pd.Series(block).astype(str).to_numpy(dtype=object)
    groups = np.empty(len(ids), dtype=np.int64)
    # a block of ids at a time: each id as a Python string costs about 60 bytes
    for start in range(0, len(ids), HASHED_AT_ONCE):
        block = ids[start:start + HASHED_AT_ONCE]
        hashed = pd.util.hash_array(as_text(block), categorize=False)
        groups[start:start + len(block)] = hashed % np.uint64(n_replicates)
    groups.flags.writeable = False
    try:
        _LAST_GROUPS[:] = [(weakref.ref(unit_ids), n_replicates, groups)]
    except TypeError:  # not weakly referable (a list): nothing kept
        pass
    return groups


_LAST_GROUPS: list = []


def relative_weights(weights: np.ndarray | None) -> np.ndarray | None:
    """The unit weights rescaled to average 1 over the units screened (None: unweighted).

    Every weighted figure is unchanged by a common factor of the weights except those
    that count units: divisors n - 1, Fisher-z weights n - 3, likelihood-ratio tests
    and the BIC. Rescaled, the weight sums stand on the scale of unit counts, so these
    stay meaningful whether the weights sum to the sample or to a population."""
    if weights is None:
        return None
    total = float(np.sum(weights))
    if not total > 0:
        return np.zeros_like(weights, dtype=float)
    return np.asarray(weights, dtype=float) * (len(weights) / total)


def summarise(panel: Panel, measure: str, kinds: list[type], chunk_units: int = CHUNK_UNITS,
              n_replicates: int = N_REPLICATES, weights: np.ndarray | None = None
              ) -> dict[type, object]:
    """Build every summary kind in one pass over chunks of units.

    ``weights`` are the units' weights already rescaled, for a panel that is a part of
    the one screened (rescaled over the whole panel, not the part: the dask engine).

    A kind with a ``shared_pass`` (a function of the chunk) is built by
    ``from_shared`` from that function's result, computed once a chunk for all the
    kinds that share it."""
    values = panel.values[measure]
    groups = replicate_groups(panel.unit_ids, n_replicates)
    if weights is None:
        weights = relative_weights(panel.weights)

    def parts(start: int) -> dict[type, object]:
        stop = min(start + chunk_units, panel.n_units)
        chunk = Chunk(values=values[start:stop],
                      weights=None if weights is None else weights[start:stop],
                      replicate=groups[start:stop], times=panel.wave_times,
                      n_replicates=n_replicates)
        shared, out = {}, {}
        for kind in kinds:
            shared_pass = getattr(kind, "shared_pass", None)
            if shared_pass is None:
                out[kind] = kind.from_chunk(chunk)
            else:
                if shared_pass not in shared:
                    shared[shared_pass] = shared_pass(chunk)
                out[kind] = kind.from_shared(shared[shared_pass])
        return out

    # the chunks are summarised by both threads of the screen (paneldiag.ahead), a few
    # at a time, and merged in chunk order as a serial run merges them; holding every
    # chunk's summaries until the end kept 1 GB more resident at 10M x 20
    merged: dict[type, object] = {}
    starts = range(0, panel.n_units, chunk_units)
    for first in range(0, len(starts), CHUNKS_AT_ONCE):
        for part in share(parts, starts[first:first + CHUNKS_AT_ONCE]):
            for kind in kinds:
                merged[kind] = part[kind] if kind not in merged else \
                    merged[kind].merge(part[kind])
    return merged
