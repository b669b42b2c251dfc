"""Array kernels of the pattern miner: blocks, bulk prefix projection, instance counts.

Everything here works on whole levels of the prefix tree at once. An *occurrence
list* of one level is a set of parallel arrays

* ``pid``   -- prefix (node) id at this level,
* ``seq``   -- block-local sequence index,
* ``end``   -- block-local position of the last matched item,
* ``start`` -- block-local position of the first matched item (window/gap modes),

grouped so that the entries of one ``(pid, seq)`` pair are contiguous and sorted by
``end``. Three projection modes keep exactly what later levels need:

``first``
    no gap and no window: only the earliest end per ``(pid, seq)`` (the classic
    PrefixSpan projection), extended with a next-occurrence table; all one-symbol
    extensions of an occurrence are counted at once from a bit mask of the symbols
    left in its sequence.
``frontier``
    a (long) window but no gap: the Pareto frontier of ``(start, end)`` pairs per
    ``(pid, seq)`` -- the *minimal windows*; an occurrence with a later start and an
    earlier end dominates, and extending a dominating occurrence with the next
    occurrence of a symbol always dominates again.
``gap``
    a maximum gap: every viable end per ``(pid, seq)``, each with its latest start
    (the latest start dominates for the window test); new ends are enumerated in the
    bounded range the gap allows.
"""

from __future__ import annotations

import numpy as np

__all__ = []  # private module

#: Tokens per block when a next-occurrence table is used (one table row stays in cache).
_NX_BLOCK_TOKENS = 1 << 15
#: Keep all next-occurrence tables between levels when they fit in this many bytes.
_NX_CACHE_BYTES = 512 << 20
#: Target number of tokens per block when no next-occurrence table is needed.
_PLAIN_BLOCK_TOKENS = 1 << 16
#: Largest number of (occurrence, symbol) look-ups expanded at once.
_EXPAND_CHUNK = 1 << 16


# one implementation of the vectorised concatenated-ranges helper, shared with SequenceDB
from ..encoding.sequences import _ranges as ranges  # noqa: E402


def run_heads(*keys):
    """Boolean mask of the first element of each run of equal key tuples."""
    n = len(keys[0])
    head = np.ones(n, dtype=bool)
    if n > 1:
        same = np.ones(n - 1, dtype=bool)
        for k in keys:
            same &= k[1:] == k[:-1]
        head[1:] = ~same
    return head


class Occ:
    """An occurrence list (see module docstring); ``start`` may be ``None``."""

    __slots__ = ("pid", "seq", "end", "start")

    def __init__(self, pid, seq, end, start=None):
        self.pid = pid
        self.seq = seq
        self.end = end
        self.start = start

    def __len__(self):
        return len(self.pid)

    def take(self, idx):
        """Sub-list at ``idx`` (mask or indices), order preserved."""
        return Occ(self.pid[idx], self.seq[idx], self.end[idx],
                   None if self.start is None else self.start[idx])

    @staticmethod
    def concat(parts, with_start):
        """Concatenate occurrence lists."""
        if not parts:
            z = np.zeros(0, dtype=np.int32)
            return Occ(z, z.copy(), z.copy(), z.copy() if with_start else None)
        return Occ(np.concatenate([p.pid for p in parts]),
                   np.concatenate([p.seq for p in parts]),
                   np.concatenate([p.end for p in parts]),
                   np.concatenate([p.start for p in parts]) if with_start else None)


class Block:
    """A run of whole sequences with block-local positions and lookup tables."""

    def __init__(self, tok, seq_lengths, gidx, seq0, *, n_sym, nonpause=None,
                 max_gap=None, max_window=None, skip_pauses=False, perm=None):
        self.perm = perm                    # local order -> original local index (or None)
        self.tok = tok                      # local symbol ids, -1 = not in alphabet
        self.T = len(tok)
        self.n_seq = len(seq_lengths)
        self.seq0 = seq0                    # global index of the first sequence
        off = np.zeros(self.n_seq + 1, dtype=np.int64)
        np.cumsum(seq_lengths, out=off[1:])
        self.seq_start = off[:-1]
        self.seq_end = off[1:]
        self.seq_of_pos = np.repeat(np.arange(self.n_seq, dtype=np.int32), seq_lengths)
        self.gidx = gidx                    # group slot per sequence (n_groups = none)
        self.n_sym = n_sym
        self.skip_pauses = skip_pauses
        self.max_gap = max_gap
        self.max_window = max_window
        self.c = None
        if skip_pauses:
            self.c = np.zeros(self.T + 1, dtype=np.int64)
            np.cumsum(nonpause, out=self.c[1:])
        self._nx = None
        self._masks = None
        self._gap_hi = None
        self._by_sym = None
        self.keep_nx = True
        self.keep_masks = True

    # ------------------------------------------------------------ lookups
    def nx(self):
        """Next-occurrence table, shape (n_sym, T + 2): first position >= i of symbol s.

        Entries past the block hold the sentinel ``T`` (column ``T + 1`` too, so a
        failed lookup can be looked up again); callers compare with the end of the
        occurrence's own sequence.
        """
        if self._nx is not None:
            return self._nx
        T = self.T
        table = np.full((self.n_sym, T + 2), T, dtype=np.int32)
        pos = np.flatnonzero(self.tok >= 0)
        table[self.tok[pos], pos] = pos
        table[:, : T + 1] = np.minimum.accumulate(table[:, T::-1], axis=1)[:, ::-1]
        if self.keep_nx:
            self._nx = table
        return table

    def suffix_masks(self):
        """Bit ``s`` of entry ``i``: symbol ``s`` occurs in ``[i, end of i's sequence)``.

        uint64, length ``T + 1`` (needs ``n_sym <= 64``). Entry ``i`` describes the
        sequence containing position ``i``; callers zero the entry of an occurrence
        that ends its sequence.
        """
        if self._masks is not None:
            return self._masks
        T = self.T
        nx = self.nx()
        lim = np.empty(T + 1, dtype=np.int64)
        lim[:T] = self.seq_end[self.seq_of_pos]
        lim[T] = T
        masks = np.zeros(T + 1, dtype=np.uint64)
        for sym in range(self.n_sym):
            masks |= (nx[sym, : T + 1] < lim).astype(np.uint64) << np.uint64(sym)
        if self.keep_masks:
            self._masks = masks
        return masks

    def original_seq(self, seq):
        """Map block-local sequence indices (group order) to the original local order."""
        return seq if self.perm is None else self.perm[seq]

    def symbol_counts(self):
        """Occurrences of each symbol in each sequence, shape (n_seq, n_sym)."""
        valid = self.tok >= 0
        key = self.seq_of_pos[valid].astype(np.int64) * self.n_sym + self.tok[valid]
        return np.bincount(key, minlength=self.n_seq * self.n_sym).reshape(
            self.n_seq, self.n_sym)

    def positions_by_symbol(self):
        """(order, bounds): positions sorted by symbol; symbol s at order[bounds[s]:bounds[s+1]]."""
        if self._by_sym is None:
            valid = np.flatnonzero(self.tok >= 0)
            order = valid[np.argsort(self.tok[valid], kind="stable")].astype(np.int32)
            counts = np.bincount(self.tok[valid], minlength=self.n_sym)
            bounds = np.zeros(self.n_sym + 1, dtype=np.int64)
            np.cumsum(counts, out=bounds[1:])
            self._by_sym = (order, bounds)
        return self._by_sym

    def span_ok(self, start, end):
        """Window test for occurrences from ``start`` to ``end`` (inclusive)."""
        if self.skip_pauses:
            return self.c[end.astype(np.int64) + 1] - self.c[start] <= self.max_window
        return end.astype(np.int64) - start + 1 <= self.max_window

    def gap_limit(self, end):
        """Exclusive upper bound of the next item's position after ``end`` (gap rule)."""
        if self._gap_hi is None:
            pos = np.arange(self.T, dtype=np.int64)
            se = self.seq_end[self.seq_of_pos]
            if self.skip_pauses:
                hi = np.searchsorted(self.c, self.c[pos + 1] + self.max_gap, side="right")
            else:
                hi = pos + self.max_gap + 2
            self._gap_hi = np.minimum(hi, se)
        return self._gap_hi[end]

    def window_limit(self, start):
        """Exclusive upper bound of any later item's position given the first at ``start``."""
        start = start.astype(np.int64)
        if self.skip_pauses:
            return np.searchsorted(self.c, self.c[start] + self.max_window, side="right") - 1
        return start + self.max_window

    def release(self):
        """Drop cached tables (when they do not all fit in memory at once)."""
        if not self.keep_nx:
            self._nx = None
        if not self.keep_masks:
            self._masks = None


def make_blocks(tokens_local, lengths, gidx, *, n_sym, mode, nonpause=None, **cons):
    """Cut the database into blocks of whole sequences bounded in tokens."""
    budget = _PLAIN_BLOCK_TOKENS if mode == "gap" else _NX_BLOCK_TOKENS
    ends = np.cumsum(lengths)
    blocks = []
    s = 0
    n = len(lengths)
    t0 = 0
    while s < n:
        # largest e > s with ends[e-1] - t0 <= budget (at least one sequence)
        e = int(np.searchsorted(ends, t0 + budget, side="right"))
        e = max(e, s + 1)
        t1 = int(ends[e - 1])
        tok = tokens_local[t0:t1]
        lens = lengths[s:e]
        g = gidx[s:e]
        npause = None if nonpause is None else nonpause[t0:t1]
        perm = None
        if len(g) > 1 and np.any(g[1:] < g[:-1]):
            # sequences of one group side by side: (prefix, group) runs are contiguous
            perm = np.argsort(g, kind="stable")
            off = np.zeros(len(lens) + 1, dtype=np.int64)
            np.cumsum(lens, out=off[1:])
            take = ranges(off[:-1][perm], lens[perm])
            tok, lens, g = tok[take], lens[perm], g[perm]
            npause = None if npause is None else npause[take]
        blocks.append(Block(tok, lens, g, s, n_sym=n_sym, nonpause=npause, perm=perm, **cons))
        s, t0 = e, t1
    n_tok = sum(b.T + 2 for b in blocks)
    keep = mode != "gap" and n_tok * n_sym * 4 <= _NX_CACHE_BYTES
    keep_masks = mode == "first" and n_tok * 8 <= _NX_CACHE_BYTES // 2
    for b in blocks:
        b.keep_nx = keep
        b.keep_masks = keep_masks
    return blocks


# ---------------------------------------------------------------- projection
def root_extend(block, syms, mode):
    """Level-1 occurrences (every position) of the local symbols ``syms``.

    For the ``frontier`` and ``gap`` modes, where each single item is its own
    occurrence; ``pid`` holds the symbol. (The ``first`` mode starts from
    :func:`root_occurrences` instead.)
    """
    if mode == "first":
        raise ValueError("root_extend serves the frontier and gap modes")
    parts = []
    order, bounds = block.positions_by_symbol()
    for s in syms:
        pos = order[bounds[s]:bounds[s + 1]]
        parts.append(Occ(np.full(len(pos), s, dtype=np.int32), block.seq_of_pos[pos], pos,
                         pos.copy()))
    return Occ.concat(parts, True)


class LevelPlan:
    """Candidate extensions of one level, prepared once for all blocks.

    Candidate keys are *symbol-major*: ``key = sym * n_pid + pid``. Occurrence lists
    produced in that order stay sorted by (key, seq, end) without any sort, and new
    node ids are assigned in key order.
    """

    def __init__(self, allowed):
        self.allowed = allowed
        self.n_pid, self.n_sym = allowed.shape
        self.allowed_t = np.ascontiguousarray(allowed.T)
        self.pids = [np.flatnonzero(row) for row in self.allowed_t]


def extend(block, occ, plan, mode):
    """Extend every occurrence by every allowed symbol.

    Parameters
    ----------
    block : Block
    occ : Occ
        Occurrences of the current level, sorted by (pid, seq, end).
    plan : LevelPlan
        Candidate extensions per prefix.
    mode : {"first", "frontier", "gap"}

    Returns
    -------
    Occ
        New occurrences whose ``pid`` is the candidate key ``sym * n_pid + pid``
        (int64), sorted by (key, sequence, end).
    """
    if len(occ) == 0:
        return Occ.concat([], mode != "first")
    if mode != "gap":
        raise ValueError("extend() serves the gap mode; use nx_count/nx_store otherwise")
    return _extend_gap(block, occ, plan)


def root_occurrences(block):
    """One empty occurrence per sequence (ending just before it), for ``first`` mode."""
    z = np.zeros(block.n_seq, dtype=np.int32)
    return Occ(z, np.arange(block.n_seq, dtype=np.int32),
               (block.seq_start - 1).astype(np.int32))


def _nx_chunks(block, occ, plan, mode):
    """Valid one-symbol extensions, chunk by chunk (next-occurrence modes).

    Yields ``(s, pa, pb, sl, ok, ne)``: symbol ``s``; the prefixes of the chunk lie in
    ``[pa, pb)`` and are whole (a (prefix, sequence) run never straddles chunks);
    ``sl`` selects the chunk's occurrences (a slice or an index array, sorted);
    ``ok`` marks those with a next occurrence inside the sequence (and window);
    ``ne`` holds the new ends of the valid ones.
    """
    n_pid = plan.n_pid
    nx = block.nx()
    windowed = mode == "frontier" and block.max_window is not None
    n_p = np.bincount(occ.pid, minlength=n_pid)
    first = np.zeros(n_pid + 1, dtype=np.int64)
    np.cumsum(n_p, out=first[1:])
    e1 = occ.end.astype(np.int64) + 1
    lim = block.seq_end[occ.seq]
    for s in range(plan.n_sym):
        pids = plan.pids[s]
        pids = pids[n_p[pids] > 0]
        if pids.size == 0:
            continue
        row = nx[s]
        cum = np.cumsum(n_p[pids])
        i = 0
        while i < len(pids):
            done = cum[i - 1] if i else 0
            j = int(np.searchsorted(cum, done + _EXPAND_CHUNK, side="right"))
            j = max(j, i + 1)
            g = pids[i:j]
            if g[-1] - g[0] == len(g) - 1:
                sl = slice(int(first[g[0]]), int(first[g[-1] + 1]))
            else:
                sl = ranges(first[g], n_p[g])
            ne = row[e1[sl]]
            ok = ne < lim[sl]
            ne = ne[ok]
            if windowed:
                okw = block.span_ok(occ.start[sl][ok], ne)
                ok[ok] = okw
                ne = ne[okw]
            yield s, int(g[0]), int(g[-1]) + 1, sl, ok, ne
            i = j


def nx_count(block, occ, plan, mode, counts):
    """Pass 1: add distinct sequences per (symbol, prefix, group slot) to ``counts``.

    ``counts`` has shape (n_sym, n_pid, n_slots). In ``first`` mode (and at most 64
    symbols) every extension of an occurrence is counted at once from the bit mask
    of the symbols left in its sequence; ``occ`` is sorted by prefix, then sequence,
    and the block keeps each group's sequences together, so (prefix, group) runs
    are contiguous and summed with ``reduceat``.
    """
    if len(occ) == 0:
        return
    slots = counts.shape[2]
    if mode == "first" and plan.n_sym <= 64:
        masks = block.suffix_masks()
        e1 = occ.end.astype(np.int64) + 1
        lim = block.seq_end[occ.seq]
        g = block.gidx[occ.seq]
        heads = np.flatnonzero(run_heads(occ.pid, g))
        pid_h, g_h = occ.pid[heads], g[heads]
        bounds = np.append(heads, len(occ))
        step = max(1, _EXPAND_CHUNK // 8)
        i = 0
        n_h = len(heads)
        while i < n_h:
            # whole runs, about `step` occurrences at a time
            j = int(np.searchsorted(bounds, bounds[i] + step, side="right")) - 1
            j = min(max(j, i + 1), n_h)
            a, b = int(bounds[i]), int(bounds[j])
            m = masks[e1[a:b]]
            m[e1[a:b] >= lim[a:b]] = 0
            bits = np.unpackbits(m.view(np.uint8).reshape(-1, 8), axis=1,
                                 bitorder="little")[:, : plan.n_sym]
            sums = np.add.reduceat(bits, bounds[i:j] - a, axis=0, dtype=np.int64)
            counts[:, pid_h[i:j], g_h[i:j]] += sums.T
            i = j
        return
    pg = occ.pid.astype(np.int64) * slots + block.gidx[occ.seq]
    for s, pa, pb, sl, ok, ne in _nx_chunks(block, occ, plan, mode):
        key = pg[sl][ok]
        if mode == "frontier" and len(key) > 1:
            # several minimal windows of one (prefix, sequence) count once
            pid = occ.pid[sl][ok]
            seq = occ.seq[sl][ok]
            key = key[run_heads(pid, seq)]
        c = np.bincount(key - pa * slots, minlength=(pb - pa) * slots)
        counts[s, pa:pb] += c.reshape(pb - pa, slots)


def nx_store(block, occ, plan, mode, new_id, target, pats, store):
    """Pass 2: the kept extensions as the next level's occurrences, plus instance counts.

    Returns ``(occ_next or None, [(node, seq, count), ...])``: instance-count triples
    in parts, together sorted by (node, sequence).
    """
    n_pid = plan.n_pid
    parts, trip = [], []
    for s, pa, pb, sl, ok, ne in _nx_chunks(block, occ, plan, mode):
        pid = occ.pid[sl][ok]
        nid = new_id[s * n_pid + pid]
        keep = nid >= 0
        if not keep.any():
            continue
        nid = nid[keep]
        seq = occ.seq[sl][ok][keep]
        ne = ne[keep]
        start = None
        if mode == "frontier":
            start = occ.start[sl][ok][keep]
            # same (prefix, seq, new end): the later entry has the later start
            last = np.ones(len(nid), dtype=bool)
            if len(nid) > 1:
                last[:-1] = (nid[1:] != nid[:-1]) | (seq[1:] != seq[:-1]) | (ne[1:] != ne[:-1])
            nid, seq, ne, start = nid[last], seq[last], ne[last], start[last]
        part = Occ(nid.astype(np.int32), seq, ne, start)
        if store:
            parts.append(part)
        t = target[part.pid]
        if t.any():
            trip.append(instance_counts(block, part.take(t) if not t.all() else part, mode,
                                        pats))
    nxt = Occ.concat(parts, mode != "first") if store else None
    return nxt, trip


def _extend_gap(block, occ, plan):
    n_pid = plan.n_pid
    lo = occ.end.astype(np.int64) + 1
    hi = block.gap_limit(occ.end)
    if block.max_window is not None:
        hi = np.minimum(hi, block.window_limit(occ.start))
    ln = np.maximum(hi - lo, 0)
    rep = np.repeat(np.arange(len(occ), dtype=np.int64), ln)
    j = ranges(lo, ln)
    sym = block.tok[j]
    ok = sym >= 0
    rep, j, sym = rep[ok], j[ok], sym[ok]
    pid = occ.pid[rep]
    ok = plan.allowed[pid, sym]
    rep, j, sym, pid = rep[ok], j[ok], sym[ok], pid[ok]
    cand = sym.astype(np.int64) * n_pid + pid
    T1 = block.T + 1
    key = cand * T1 + j
    if key.size == 0:
        return Occ.concat([], True)
    if int(key.max()) < np.iinfo(np.int64).max // T1:
        # the latest start rides in the low digits: one value sort, keep each run's last
        key2 = np.sort(key * T1 + occ.start[rep])
        key = key2 // T1
        last = np.ones(len(key), dtype=bool)
        last[:-1] = key[1:] != key[:-1]
        key, start = key[last], key2[last] % T1
    else:
        order = np.argsort(key)
        key = key[order]
        start = occ.start[rep[order]]
        heads = np.flatnonzero(run_heads(key))
        start = np.maximum.reduceat(start, heads)
        key = key[heads]
    cand = key // (block.T + 1)
    j = (key % (block.T + 1)).astype(np.int32)
    return Occ(cand, block.seq_of_pos[j], j, start.astype(np.int32))


def count_support(block, occ, n_keys, n_slots):
    """Distinct sequences per (candidate key, group slot), shape (n_keys, n_slots)."""
    if len(occ) == 0:
        return np.zeros((n_keys, n_slots), dtype=np.int64)
    head = run_heads(occ.pid, occ.seq)
    key = occ.pid[head].astype(np.int64) * n_slots + block.gidx[occ.seq[head]]
    return np.bincount(key, minlength=n_keys * n_slots).reshape(n_keys, n_slots)


# ------------------------------------------------------------ instance counts
def instance_counts(block, occ, mode, pats=None):
    """Instance count per (pid, seq) group of ``occ`` by the earliest-end greedy rule.

    Returns ``(pid, seq, count)`` with one entry per group. ``pats`` (shape
    (n_pid, k), local symbols) is needed in ``first`` mode, where the greedy scan
    continues from the first occurrence with the next-occurrence table.
    """
    if len(occ) == 0:
        z = np.zeros(0, dtype=np.int32)
        return z, z.copy(), z.copy()
    if mode == "first":
        cnt = _jump_counts(block, pats, occ.pid, occ.seq, occ.end)
        return occ.pid.astype(np.int32), occ.seq.astype(np.int32), cnt.astype(np.int32)
    start = occ.start.astype(np.int64)
    end = occ.end.astype(np.int64)
    head = run_heads(occ.pid, occ.seq)
    grp = np.cumsum(head) - 1
    M = block.T + 2
    if mode == "gap":
        # keep the minimal windows: start above every start of an earlier end
        key = grp * M + start
        cm = np.maximum.accumulate(key)
        keep = np.ones(len(key), dtype=bool)
        keep[1:] = key[1:] > cm[:-1]
        start, end, grp, head = start[keep], end[keep], grp[keep], head[keep]
    cnt = _chain_counts(grp, start, end, M)
    h = np.flatnonzero(head)
    sel = np.flatnonzero(run_heads(occ.pid, occ.seq))
    return occ.pid[sel].astype(np.int32), occ.seq[sel].astype(np.int32), cnt[h].astype(np.int32)


def _chain_counts(grp, start, end, M):
    """Length of the greedy chain from each entry (entries sorted, starts increasing)."""
    n = len(grp)
    ks = grp * M + start
    ke = grp * M + end
    nxt = np.searchsorted(ks, ke, side="right")
    clipped = np.minimum(nxt, n - 1)
    nxt = np.where((nxt < n) & (grp[clipped] == grp), nxt, n)
    val = np.ones(n + 1, dtype=np.int64)
    val[n] = 0
    ptr = np.append(nxt, n)
    while True:
        if np.all(ptr[:n] == n):
            break
        val = val + val[ptr]
        val[n] = 0
        ptr = ptr[ptr]
    return val[:n]


def _jump_counts(block, pats, pid, seq, end):
    """Greedy earliest-end instance count without constraints, from the first occurrence.

    Each round matches one more instance of every still-active (pattern, sequence)
    pair with ``k`` next-occurrence look-ups; a pair drops out when its last item
    falls past the end of its sequence (positions only grow, so one test per round
    suffices; the sentinel columns keep failed look-ups in range).
    """
    k = pats.shape[1]
    if k == 1:
        table = block.symbol_counts()
        return table[seq, pats[pid, 0]].astype(np.int64)
    nxf = block.nx().ravel()
    T2 = block.T + 2
    dead = block.T + 1                                # NX[:, T + 1] = T: stays dead
    itype = np.int32 if block.n_sym * T2 < 2 ** 31 else np.int64
    rowoff = pats.astype(itype) * itype(T2)           # (n_pid, k) offsets into nxf
    n = len(pid)
    cnt = np.ones(n, dtype=np.int32)
    for c0 in range(0, n, _EXPAND_CHUNK):
        c1 = min(c0 + _EXPAND_CHUNK, n)
        offs = np.ascontiguousarray(rowoff[pid[c0:c1]].T)   # (k, m)
        pos = end[c0:c1].astype(itype) + 1
        lim = block.seq_end[seq[c0:c1]].astype(itype)
        idx = np.arange(c0, c1)
        tmp = np.empty_like(pos)
        while idx.size:
            p = pos
            for j in range(k):
                np.add(offs[j], p, out=tmp)
                np.take(nxf, tmp, out=p)
                p += 1
            ok = p <= lim
            n_ok = int(np.count_nonzero(ok))
            if n_ok == 0:
                break
            if n_ok < 0.5 * len(idx):
                # compact when many pairs are done
                idx, pos, lim, offs = idx[ok], p[ok], lim[ok], offs[:, ok]
                tmp = np.empty_like(pos)
                cnt[idx] += 1
            else:
                cnt[idx] += ok
                p[~ok] = dead
                pos = p
    return cnt
