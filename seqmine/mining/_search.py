"""Level-wise search driver shared by the miner and the matcher (private).

The search grows the prefix tree one level at a time. For each level it counts, in
bulk, the sequences of every group containing every candidate extension, keeps the
candidates the caller accepts, and numbers them. Next-occurrence modes (no gap
limit) keep no occurrence lists between levels: each block of sequences *replays*
the kept levels from the root (cheap next-occurrence look-ups) right before it is
needed, so memory stays bounded by one block. The gap mode stores its occurrence
lists between levels (the gap keeps them short).
"""

from __future__ import annotations

import numpy as np

from .._util.progress import progress
from ..errors import PatternExplosionError
from . import _kernels as K

#: Largest (patterns of one length) x (frequent tokens) table a mining level may build;
#: each cell costs about 25 bytes, so the limit keeps a level near 1.6 GB.
MAX_CANDIDATE_CELLS = 2**26

__all__ = []  # private module

def search(db, *, alphabet, gidx, G, mode, level1, allowed_fn, keep_fn, target_fn,
           max_length, max_patterns, cons, with_counts=True):
    """Level-wise bulk projection.

    Returns ``levels`` (index 0 = the root) with per-level node arrays ``parent``,
    ``sym``, ``suffix``, ``pats`` (local symbols), ``support`` (n, G), ``child_in``
    (table of level k-1 ids x symbols -> level k ids), ``target``; and the instance
    count triples per block ``(n_seq, [(level, node, local seq, count), ...])``; and
    the work counters of this search, ``{"mode", "n_blocks", "levels": [{"length",
    "candidates", "frequent", "occurrences_extended", "occurrences_kept"}, ...],
    "instance_counts"}``.
    """
    n_sym = len(alphabet)
    lut = np.full(len(db.vocab), -1, dtype=np.int32)
    lut[alphabet] = np.arange(n_sym, dtype=np.int32)
    tok_local = lut[db.tokens]
    nonpause = (~db.is_pause[db.tokens]).astype(np.int64) if cons["skip_pauses"] else None
    blocks = K.make_blocks(tok_local, db.lengths, gidx, n_sym=n_sym, mode=mode,
                           nonpause=nonpause, **cons)
    slots = G + 1
    root = dict(parent=np.zeros(1, np.int64), sym=np.zeros(1, np.int64),
                suffix=np.full(1, -1, np.int64), pats=np.zeros((1, 0), np.int64),
                support=np.zeros((1, G), np.int64), child_in=None,
                target=np.zeros(1, bool))
    levels = [root]
    steps = [None]                   # steps[j] = (plan, new_id): level j-1 -> level j
    stats = dict(mode=mode, n_blocks=len(blocks), levels=[])
    triples = [(block.n_seq, []) for block in blocks]
    stored = mode == "gap"
    occ = [None] * len(blocks)
    total = 0
    k = 0

    def replay(block, upto, trip=None):
        """Occurrences of the level-``upto`` nodes in ``block`` (instance counts into trip)."""
        o = K.root_occurrences(block) if mode == "first" else None
        for j in range(1, upto + 1):
            plan_j, new_id_j = steps[j]
            lev = levels[j]
            want = trip is not None and lev["target"].any()
            target = lev["target"] if want else np.zeros(len(lev["sym"]), dtype=bool)
            if j == 1 and mode != "first":
                e = K.root_extend(block, level1, mode)
                pid = new_id_j[e.pid]
                ok = pid >= 0
                o = e.take(ok)
                o.pid = pid[ok].astype(np.int32)
                if want:
                    t = o.take(target[o.pid])
                    node, seq, cnt = K.instance_counts(block, t, mode, lev["pats"])
                    trip.append((j, node, block.original_seq(seq), cnt))
            else:
                o, parts = K.nx_store(block, o, plan_j, mode, new_id_j, target,
                                      lev["pats"], store=j < upto or trip is None)
                if want:
                    trip.extend((j, node, block.original_seq(seq), cnt)
                                for node, seq, cnt in parts)
        return o

    bar = progress(total=max_length, desc="mining levels", unit="level")
    try:
        while max_length is None or k < max_length:
            n_prev = len(levels[k]["sym"])
            if n_prev * n_sym > MAX_CANDIDATE_CELLS:  # dense level tables: bound memory
                raise PatternExplosionError(
                    f"Mining stopped: {n_prev} frequent patterns of length {k} times {n_sym} "
                    f"frequent tokens is too many candidate extensions for memory (limit "
                    f"{MAX_CANDIDATE_CELLS}). Raise 'min_support' (--min-support), lower "
                    f"'max_length', or merge rare actions with --mapping.")
            if k == 0:
                allowed = np.zeros((1, n_sym), dtype=bool)
                allowed[0, level1] = True
            else:
                allowed = allowed_fn(levels, k)
            plan = K.LevelPlan(allowed)
            flat = np.flatnonzero(plan.allowed_t.ravel())   # keys sym * n_prev + parent
            if flat.size == 0:
                break
            n_keys = n_prev * n_sym
            counts = np.zeros((n_keys, slots), dtype=np.int64)
            # at the last level the gap mode counts first and re-projects only the kept
            # candidates afterwards, instead of holding every candidate's occurrences
            last = max_length is not None and k + 1 >= max_length and k > 0
            ext = []
            n_in = 0
            for b, block in enumerate(blocks):
                if stored or (k == 0 and mode == "frontier"):
                    if k == 0:
                        e = K.root_extend(block, level1, mode)
                        n_in += block.T
                    else:
                        e = K.extend(block, occ[b], plan, mode)
                        n_in += len(occ[b])
                    counts += K.count_support(block, e, n_keys, slots)
                    if stored:
                        ext.append(None if last else e)
                    del e
                else:
                    o = replay(block, k)
                    n_in += len(o)
                    K.nx_count(block, o, plan, mode, counts.reshape(n_sym, n_prev, slots))
                block.release()
            counts = counts[flat]
            keep = keep_fn(k + 1, counts[:, :G], flat)
            new_flat = flat[keep]
            stats["levels"].append(dict(
                length=k + 1, candidates=int(len(flat)), frequent=int(len(new_flat)),
                occurrences_extended=int(n_in),
                occurrences_kept=int(counts[keep].sum())))
            if new_flat.size == 0:
                break
            new_id = np.full(n_keys, -1, dtype=np.int64)
            new_id[new_flat] = np.arange(len(new_flat))
            parent = new_flat % n_prev
            sym = new_flat // n_prev
            prev = levels[k]
            if k == 0:
                suffix = np.zeros(len(new_flat), dtype=np.int64)
            else:
                q = prev["suffix"][parent]
                suffix = np.full(len(new_flat), -1, dtype=np.int64)
                has = q >= 0
                suffix[has] = prev["child_in"][q[has], sym[has]]
            lev = dict(parent=parent, sym=sym, suffix=suffix,
                       pats=np.concatenate([prev["pats"][parent], sym[:, None]], axis=1),
                       support=counts[keep, :G],
                       child_in=np.ascontiguousarray(new_id.reshape(n_sym, n_prev).T))
            lev["target"] = target_fn(k + 1, lev)
            levels.append(lev)
            steps.append((plan, new_id))
            total += len(new_flat)
            if max_patterns is not None and total > max_patterns:
                raise PatternExplosionError(
                    f"Mining stopped: more than {max_patterns} frequent patterns (reached at "
                    f"length {k + 1}). Raise 'max_patterns' (--max-patterns) if you need them "
                    f"all, or raise 'min_support', lower 'max_length' or set 'max_gap'.")
            if stored:
                if last:
                    kept = np.zeros((n_prev, n_sym), dtype=bool)
                    kept[parent, sym] = True
                    plan = K.LevelPlan(kept)
                for b, block in enumerate(blocks):
                    if last:
                        if not (with_counts and lev["target"].any()):
                            occ[b] = None
                            continue
                        e = K.extend(block, occ[b], plan, mode)
                    else:
                        e = ext[b]
                        ext[b] = None
                    pid = new_id[e.pid]
                    ok = pid >= 0
                    e = e.take(ok)
                    e.pid = pid[ok].astype(np.int32)
                    occ[b] = e
                    if with_counts and lev["target"].any():
                        t = e.take(lev["target"][e.pid])
                        node, seq, cnt = K.instance_counts(block, t, mode, lev["pats"])
                        triples[b][1].append((k + 1, node, block.original_seq(seq), cnt))
                    if last:
                        occ[b] = None
                    block.release()
            k += 1
            bar.update(1)
        if not stored and with_counts and len(levels) > 1:
            for b, block in enumerate(blocks):
                replay(block, len(levels) - 1, triples[b][1])
                block.release()
    finally:
        bar.close()
    stats["instance_counts"] = int(sum(len(t[1]) for _, trip in triples for t in trip))
    return levels, triples, stats


def node_offsets(levels):
    """Global node number of the first node of each level (the root is not counted)."""
    sizes = [0, 0] + [len(levels[k]["sym"]) for k in range(1, len(levels))]
    return np.cumsum(sizes)   # offsets[k] = first node of level k; offsets[-1] = total


def assemble_counts(triples, offsets, select):
    """Sparse (n_sequences, len(select)) instance counts of the global nodes ``select``.

    Each block's triples arrive sorted by (level, node), so a block's nodes x
    sequences CSR is built without sorting; its rows are picked in output order and
    transposed (linear time) straight into the preallocated result. ``triples`` is
    emptied block by block as it is consumed, to bound memory.
    """
    import scipy.sparse as sp

    n_nodes = int(offsets[-1])
    select = np.asarray(select, dtype=np.int64)
    identity = len(select) == n_nodes and np.array_equal(select, np.arange(n_nodes))
    chosen = np.zeros(n_nodes, dtype=bool)
    chosen[select] = True
    dup = len(np.unique(select)) != len(select)
    n_total = sum(n for n, _ in triples)
    nnz = 0
    for _, trip in triples:
        for k, nd, _, _ in trip:
            nnz += int(np.count_nonzero(chosen[nd + offsets[k]])) if not dup else 0
    if dup:  # a node picked twice (match with repeated patterns): size from the parts
        nnz = None
    itype = np.int32 if (nnz or 0) < 2 ** 31 and len(select) < 2 ** 31 else np.int64
    indptr = np.zeros(n_total + 1, dtype=np.int64)
    if nnz is not None:
        indices = np.empty(nnz, dtype=itype)
        data = np.empty(nnz, dtype=np.int32)
    pieces = []
    row0, pos = 0, 0
    for b, (n_seq, trip) in enumerate(triples):
        if trip:
            node = np.concatenate([nd + offsets[k] for k, nd, _, _ in trip])
            seq = np.concatenate([sq for _, _, sq, _ in trip])
            cnt = np.concatenate([c for _, _, _, c in trip])
        else:
            node = np.zeros(0, dtype=np.int64)
            seq = cnt = np.zeros(0, dtype=np.int32)
        triples[b] = (n_seq, [])
        bptr = np.zeros(n_nodes + 1, dtype=np.int64)
        np.cumsum(np.bincount(node, minlength=n_nodes), out=bptr[1:])
        by_node = sp.csr_matrix((cnt, seq, bptr), shape=(n_nodes, n_seq))
        del node, seq, cnt
        if not identity:
            by_node = by_node[select]
        part = by_node.T.tocsr()
        del by_node
        m = part.nnz
        indptr[row0 + 1: row0 + n_seq + 1] = part.indptr[1:] + pos
        if nnz is None:
            pieces.append((part.indices, part.data))
        else:
            indices[pos:pos + m] = part.indices
            data[pos:pos + m] = part.data
        row0 += n_seq
        pos += m
    if nnz is None:
        indices = np.concatenate([i for i, _ in pieces]) if pieces else np.zeros(0, itype)
        data = np.concatenate([d for _, d in pieces]) if pieces else np.zeros(0, np.int32)
    out = sp.csr_matrix((data, indices, indptr), shape=(n_total, len(select)))
    out.has_sorted_indices = True
    return out


def build_trie(local, n_sym):
    """Prefix tree of the (local-symbol) patterns, one dict per level (index 0 = root).

    Nodes of a level are numbered like the search numbers them: by last symbol,
    then by the parent's number.
    """
    max_len = max(len(p) for p in local)
    pattern_set = set(local)
    trie = [dict(index={(): 0})]
    for k in range(1, max_len + 1):
        prev_index = trie[k - 1]["index"]
        nodes = sorted({p[:k] for p in local if len(p) >= k},
                       key=lambda t: (t[-1], prev_index[t[:-1]]))
        index = {t: i for i, t in enumerate(nodes)}
        child_in = np.full((len(prev_index), n_sym), -1, dtype=np.int64)
        for t, i in index.items():
            child_in[prev_index[t[:-1]], t[-1]] = i
        trie.append(dict(index=index, child_in=child_in,
                         sym=np.array(sorted({t[-1] for t in nodes}) if k == 1 else [],
                                      dtype=np.int64),
                         is_pattern=np.array([t in pattern_set for t in nodes], dtype=bool)))
    return trie
