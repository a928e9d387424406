"""Reference for weft_index_kmeans (tests/reference/test_kmeans_reference.c): Lloyd's rounds
of scipy.cluster.vq.kmeans2 (scipy 1.10, Debian 12) from given starting centroids.
usage: kmeans_scipy.py DATA INIT N D K ITERS
DATA and INIT are raw little-endian float32 (N x D and K x D). Prints "labels" and the N
labels, then "centroids" and the K x D centroids."""
import sys
import warnings

import numpy as np
from scipy.cluster.vq import kmeans2

data_path, init_path = sys.argv[1], sys.argv[2]
n, d, k, iters = (int(v) for v in sys.argv[3:7])
data = np.fromfile(data_path, dtype="<f4").reshape(n, d).astype(np.float64)
init = np.fromfile(init_path, dtype="<f4").reshape(k, d).astype(np.float64)
with warnings.catch_warnings():
    warnings.simplefilter("ignore")   # "One of the clusters is empty": kept, as weft does
    centroids, labels = kmeans2(data, init, iter=iters, minit="matrix", missing="warn")
print("labels", " ".join(str(int(v)) for v in labels))
print("centroids", " ".join(repr(float(v)) for v in centroids.ravel()))
