"""Filtered ranks recomputed by brute force with numpy, apart from weft's C code, for
tests/reference/test_eval_reference.c.

Usage: /usr/bin/python3 ranks_numpy.py DIR, where DIR holds
  meta.txt    "n_nodes n_relations exclude_self" (exclude_self 0 or 1)
  known.tsv   "s r t" per line: every known true triple
  test.tsv    "s r t" per line: the queries
  scores.f32  float32 array (n_relations, 2, n_nodes, n_nodes): [r, 0, s] are the tail
              scores of (s, r, ?), [r, 1, t] the head scores of (?, r, t)
Prints "tail_rank head_rank" for each test triple, then "overall n mrr mr h1 h3 h10", then
"relation r n mrr mr h1 h3 h10" for each relation with queries.

The rule: the candidates are every node except the other known answers of the query (the
target itself always stays) and, with exclude_self, the anchor; rank = 1 + #(candidates
scoring higher) + #(other candidates scoring equal) / 2.
"""
import sys

import numpy as np


def rank(row, target, banned, anchor, exclude_self):
    keep = np.ones(row.shape[0], dtype=bool)
    keep[list(banned)] = False
    if exclude_self:
        keep[anchor] = False
    keep[target] = True
    others = row[keep]
    higher = np.count_nonzero(others > row[target])
    equal = np.count_nonzero(others == row[target]) - 1   # the target ties with itself
    return 1.0 + higher + equal / 2.0


def metrics(ranks):
    r = np.asarray(ranks, dtype=np.float64)
    return (len(r), np.mean(1.0 / r), np.mean(r), np.mean(r <= 1), np.mean(r <= 3),
            np.mean(r <= 10))


def main(d):
    n, n_rel, exclude_self = (int(x) for x in open(d + "/meta.txt").read().split())
    known = np.loadtxt(d + "/known.tsv", dtype=np.int64, ndmin=2)
    test = np.loadtxt(d + "/test.tsv", dtype=np.int64, ndmin=2)
    scores = np.fromfile(d + "/scores.f32", dtype=np.float32).reshape(n_rel, 2, n, n)
    tails, heads = {}, {}
    for s, r, t in known:
        tails.setdefault((s, r), set()).add(t)
        heads.setdefault((t, r), set()).add(s)
    by_rel, all_ranks = {}, []
    for s, r, t in test:
        rt = rank(scores[r, 0, s], t, tails.get((s, r), set()), s, exclude_self)
        rh = rank(scores[r, 1, t], s, heads.get((t, r), set()), t, exclude_self)
        print(repr(rt), repr(rh))
        all_ranks += [rt, rh]
        by_rel.setdefault(r, []).extend([rt, rh])
    print("overall %d %r %r %r %r %r" % metrics(all_ranks))
    for r in sorted(by_rel):
        print("relation %d %d %r %r %r %r %r" % ((r,) + metrics(by_rel[r])))


main(sys.argv[1])
