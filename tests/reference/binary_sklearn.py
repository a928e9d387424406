"""AUC-ROC and average precision computed by scikit-learn (roc_auc_score and
average_precision_score), for tests/reference/test_eval_reference.c.

Usage: /usr/bin/python3 binary_sklearn.py FILE...; each FILE holds "label score" lines
(label 0 or 1, score a decimal that reads back as the same float32). Prints "auc ap" for
each file, in order, with every digit (repr).
"""
import sys

import numpy as np
from sklearn.metrics import average_precision_score, roc_auc_score

for path in sys.argv[1:]:
    data = np.loadtxt(path, ndmin=2)
    labels = data[:, 0].astype(int)
    scores = data[:, 1].astype(np.float32)
    print(repr(float(roc_auc_score(labels, scores))),
          repr(float(average_precision_score(labels, scores))))
