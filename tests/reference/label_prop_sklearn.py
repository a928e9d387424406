"""Label propagation computed by scikit-learn 1.2 (sklearn.semi_supervised.LabelPropagation),
for tests/reference/test_label_prop_reference.c.

Usage: /usr/bin/python3 label_prop_sklearn.py EDGES DIR MAX_ITER TOL, where EDGES is a
`source<TAB>target` file (tests/data/cora/edges.tsv) and DIR holds
  nodes.txt   node names, one a line, in weft's id order
  train.txt   "node_id class_id" for each labelled (training) node; classes are 0 .. K-1
              and every one of them has a training node

The graph is given to scikit-learn as a callable kernel returning the dense 0/1 adjacency
matrix A (symmetric: each edge both ways, repeats once, no self-loops). LabelPropagation
divides it by its column sums (for symmetric A that is D^-1 A), then repeats
Y <- D^-1 A Y, rows divided by their sums (zero rows left zero), training rows reset to
their one-hot labels, until sum |Y - Y_previous| < tol or max_iter steps
(_label_propagation.py, BaseLabelPropagation.fit). The dense kernel is used on purpose:
scikit-learn 1.2's sparse branch of LabelPropagation._build_graph divides every entry by
np.diag() of a 1 x n matrix, i.e. by the first column sum only.

Prints "iter n_iter_", then "freq f_0 .. f_{K-1}" (the share of each class among the
training nodes, numpy bincount), then for every node v "node v reached p_0 .. p_{K-1}",
reached 1 when some training label reached v (a row sum > 0), with every digit (repr);
last "test_accuracy a" over the nodes listed in DIR/test.txt ("node_id class_id").
"""
import sys
import warnings

import numpy as np
from sklearn.semi_supervised import LabelPropagation


def main(edges_path, d, max_iter, tol):
    with open(d + "/nodes.txt") as f:
        names = [line.rstrip("\n") for line in f]
    index = {name: i for i, name in enumerate(names)}
    n = len(names)
    a = np.zeros((n, n))
    with open(edges_path) as f:
        for line in f:
            if not line.strip() or line.startswith("#"):
                continue
            s, t = (index[x] for x in line.split()[:2])
            if s != t:
                a[s, t] = a[t, s] = 1.0
    train = np.loadtxt(d + "/train.txt", dtype=np.int64, ndmin=2)
    test = np.loadtxt(d + "/test.txt", dtype=np.int64, ndmin=2)
    y = np.full(n, -1, dtype=np.int64)
    y[train[:, 0]] = train[:, 1]
    n_classes = int(train[:, 1].max()) + 1

    # The kernel is divided in place by scikit-learn: hand it a copy.
    lp = LabelPropagation(kernel=lambda x1, x2: a.copy(), max_iter=max_iter, tol=tol)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # ConvergenceWarning is reported through n_iter_
        lp.fit(np.arange(n, dtype=np.float64)[:, None], y)
    assert list(lp.classes_) == list(range(n_classes))
    dist = lp.label_distributions_
    reached = dist.sum(axis=1) > 0
    freq = np.bincount(train[:, 1], minlength=n_classes) / len(train)

    print("iter %d" % lp.n_iter_)
    print("freq %s" % " ".join(repr(float(x)) for x in freq))
    for v in range(n):
        print("node %d %d %s" % (v, int(reached[v]), " ".join(repr(float(x)) for x in dist[v])))
    acc = np.mean(lp.transduction_[test[:, 0]] == test[:, 1])
    print("test_accuracy %r" % float(acc))


main(sys.argv[1], sys.argv[2], int(sys.argv[3]), float(sys.argv[4]))
