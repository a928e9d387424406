"""Classification metrics computed by scikit-learn 1.2 and numpy, for
tests/reference/test_classify_reference.c.

Usage: /usr/bin/python3 classify_sklearn.py FILE WHICH N_CLASSES; FILE holds one line per
node, "y part p_0 .. p_{K-1}" (class id, part code, probabilities as decimals that read back
as the same float32); only the nodes with part == WHICH are scored. The prediction is the
first largest probability (numpy argmax: ties go to the lowest class id).

Prints, with every digit (repr):
  n COUNT
  accuracy A                 sklearn.metrics.accuracy_score
  macro_f1 F                 sklearn.metrics.f1_score(average="macro"): the mean over the
                             classes present among the true or predicted labels
  log_loss L                 sklearn.metrics.log_loss(eps=1e-15, labels=0..K-1), which also
                             rescales each clipped row to sum 1
  log_loss_clipped L         numpy: mean of -log(max(p_true, 1e-15)), no rescaling
  ece E                      numpy, expected calibration error as defined by Guo, Pleiss, Sun &
                             Weinberger 2017, "On calibration of modern neural networks" (ICML),
                             section 2: confidence = the top probability, 15 equal-width bins
                             (lower, upper] over [0, 1], ECE = sum over bins of
                             |accuracy(bin) - mean confidence(bin)| * n_bin / n
  class j P R F S            sklearn.metrics.precision_recall_fscore_support(labels=0..K-1,
                             zero_division=0), one line per class
  confusion j c_0 .. c_{K-1} sklearn.metrics.confusion_matrix(labels=0..K-1): row = true class
"""
import sys

import numpy as np
from sklearn.metrics import (accuracy_score, confusion_matrix, f1_score, log_loss,
                             precision_recall_fscore_support)

ECE_BINS = 15


def ece(conf, correct):
    edges = np.linspace(0.0, 1.0, ECE_BINS + 1)
    total = 0.0
    for lo, hi in zip(edges[:-1], edges[1:]):
        in_bin = (conf > lo) & (conf <= hi)
        if in_bin.any():
            total += abs(correct[in_bin].mean() - conf[in_bin].mean()) * in_bin.mean()
    return total


def main(path, which, k):
    data = np.loadtxt(path, ndmin=2)
    keep = data[:, 1].astype(int) == which
    y = data[keep, 0].astype(int)
    prob = data[keep, 2:].astype(np.float32).astype(np.float64)
    assert prob.shape[1] == k
    pred = np.argmax(prob, axis=1)
    labels = list(range(k))
    print("n %d" % len(y))
    print("accuracy %r" % float(accuracy_score(y, pred)))
    print("macro_f1 %r" % float(f1_score(y, pred, average="macro", zero_division=0)))
    print("log_loss %r" % float(log_loss(y, prob, eps=1e-15, labels=labels)))
    p_true = prob[np.arange(len(y)), y]
    print("log_loss_clipped %r" % float(np.mean(-np.log(np.maximum(p_true, 1e-15)))))
    print("ece %r" % float(ece(prob.max(axis=1), (pred == y).astype(np.float64))))
    p, r, f, s = precision_recall_fscore_support(y, pred, labels=labels, zero_division=0)
    for j in labels:
        print("class %d %r %r %r %d" % (j, float(p[j]), float(r[j]), float(f[j]), s[j]))
    cm = confusion_matrix(y, pred, labels=labels)
    for j in labels:
        print("confusion %d %s" % (j, " ".join(str(int(c)) for c in cm[j])))


main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]))
