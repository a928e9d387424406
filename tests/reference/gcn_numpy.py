"""GCN forward passes and last-layer attributions recomputed with numpy, apart from weft's C
code, for tests/reference/test_gcn_reference.c.

Usage: /usr/bin/python3 gcn_numpy.py EDGES DIR N_CASES, where EDGES is a `source<TAB>target`
file (tests/data/karate/edges.tsv) and DIR holds
  nodes.txt        node names, one a line, in weft's id order
  c<k>_meta.txt    line 1: "n_layers norm act has_bias input row_normalise attribute"
                   (norm sym|row, act relu|sigmoid|linear, input features|embedding, flags 0/1);
                   line 2: dims[0] .. dims[n_layers]
  c<k>_x.tsv       features input: `node<TAB>index[:value] ...` (value 1 when absent; nodes
                   without a line have a zero row)
  c<k>_emb.f32     embedding input: float32 (n, dims[0])
  c<k>_w<l>.f32    float32 (dims[l], dims[l+1]);  c<k>_b<l>.f32: float32 (dims[l+1])

The formula is Kipf & Welling 2017 ("Semi-supervised classification with graph convolutional
networks", ICLR), eq. (2) with the renormalisation trick: A~ = A + I over the undirected graph
(each edge both ways, repeats once), D~ its row sums, A' = D~^-1/2 A~ D~^-1/2 ("sym") or
D~^-1 A~ ("row", the mean over self and neighbours); then layer by layer
    Z_l = A' H_l W_l + b_l,   H_{l+1} = act(Z_l),
with the last Z the output (no activation). The attribution of node v splits its output row
into the terms of the last product: A'[v, u] * (H_{L-1} W_{L-1})[u, :] for each u with
A'[v, u] != 0.

Prints for each case k: "case k", then "out v z_0 .. z_{d-1}" for every node v, then when the
case asks for attributions, for every node v "row v count" followed by count lines
"u c_0 .. c_{d-1}", u ascending. Every number with all its digits (repr).
"""
import sys

import numpy as np


def adjacency(edges_path, index, norm):
    n = len(index)
    a = np.zeros((n, n))
    with open(edges_path) as f:
        for line in f:
            if not line.strip() or line.startswith("#"):
                continue
            s, t = line.split()[:2]
            a[index[s], index[t]] = 1.0
            a[index[t], index[s]] = 1.0
    a_tilde = a + np.eye(n)   # karate has no self-loops; A + I has ones on the diagonal
    deg = a_tilde.sum(axis=1)
    if norm == "sym":
        inv_sqrt = 1.0 / np.sqrt(deg)
        return inv_sqrt[:, None] * a_tilde * inv_sqrt[None, :]
    if norm == "row":
        return a_tilde / deg[:, None]
    raise ValueError("unknown normalisation " + norm)


def features(path, index, width, row_normalise):
    x = np.zeros((len(index), width))
    with open(path) as f:
        for line in f:
            fields = line.rstrip("\n").split("\t")
            v = index[fields[0]]
            for tok in " ".join(fields[1:]).split():
                i, _, val = tok.partition(":")
                # weft stores a float32: read the value the same way
                x[v, int(i)] = float(np.float32(float(val))) if val else 1.0
    if row_normalise:
        sums = x.sum(axis=1)
        nz = sums != 0
        x[nz] /= sums[nz][:, None]
    return x


ACT = {
    "relu": lambda z: np.maximum(z, 0.0),
    "sigmoid": lambda z: 1.0 / (1.0 + np.exp(-z)),
    "linear": lambda z: z,
}


def load_f32(path, shape):
    return np.fromfile(path, dtype=np.float32).astype(np.float64).reshape(shape)


def run_case(edges_path, d, k, names, index):
    p = "%s/c%d_" % (d, k)
    with open(p + "meta.txt") as f:
        head = f.readline().split()
        dims = [int(x) for x in f.readline().split()]
    n_layers, norm, act, has_bias, inp, row_norm, attribute = head
    n_layers, has_bias = int(n_layers), head[3] == "1"
    n = len(names)
    assert len(dims) == n_layers + 1
    a = adjacency(edges_path, index, norm)
    if inp == "features":
        h = features(p + "x.tsv", index, dims[0], row_norm == "1")
    else:
        h = load_f32(p + "emb.f32", (n, dims[0]))
    msg = None
    for l in range(n_layers):
        w = load_f32(p + "w%d.f32" % l, (dims[l], dims[l + 1]))
        u = h @ w
        z = a @ u
        if has_bias:
            z = z + load_f32(p + "b%d.f32" % l, (dims[l + 1],))
        if l == n_layers - 1:
            msg, h = u, z
        else:
            h = ACT[act](z)
    print("case %d" % k)
    for v in range(n):
        print("out %d %s" % (v, " ".join(repr(float(x)) for x in h[v])))
    if attribute == "1":
        for v in range(n):
            nbrs = np.flatnonzero(a[v])
            print("row %d %d" % (v, len(nbrs)))
            for u in nbrs:
                print("%d %s" % (u, " ".join(repr(float(x)) for x in a[v, u] * msg[u])))


def main(edges_path, d, n_cases):
    with open(d + "/nodes.txt") as f:
        names = [line.rstrip("\n") for line in f]
    index = {name: i for i, name in enumerate(names)}
    for k in range(n_cases):
        run_case(edges_path, d, k, names, index)


main(sys.argv[1], sys.argv[2], int(sys.argv[3]))
