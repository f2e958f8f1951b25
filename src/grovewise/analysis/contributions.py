"""Exact per-case feature contributions (Shapley values) and their pairwise interactions.

What is explained
-----------------
Path-dependent TreeSHAP (Lundberg, Erion, Lee 2018, "Consistent Individualized Feature
Attribution for Tree Ensembles", arXiv:1802.03888; Lundberg et al. 2020, "From local
explanations to global understanding with explainable AI for trees", Nature Machine
Intelligence 2:56-67). For one tree and one case ``x`` the value of a set ``S`` of features is
the path-dependent conditional expectation ``v(S)``: walk down from the root, follow ``x`` at a
split whose feature is in ``S``, otherwise average both children weighted by their share of
the node's ``Tree.cover``. The contributions are the Shapley values of ``v``, summed over
trees; ``base + values.sum(axis=1)`` is the explained output:

- link ``mean`` (averaging forests): the mean of the trees' leaf probability vectors, one
  output per class (``output == "probability"``), equal to ``Forest.predict_proba``;
- links ``logistic`` / ``softmax`` (boosting): the raw margin (log-odds), one output per
  margin column (``output == "margin"``), equal to ``Forest.decision_function``, with
  ``base`` = the model's starting score + the trees' expected values (as XGBoost's
  ``pred_contribs`` states it).

Splits compare as the model does (``Forest.compare_input`` and the ``<`` / ``<=`` rule of
``traversal.py``): every split is decided by ``traversal.goes_left``, missing values and
categorical splits included.

Two exact algorithms
--------------------
``algorithm="path"`` is Algorithm 2 of Lundberg, Erion, Lee (2018): a walk that keeps, for the
unique features on the path to a node, the zero fraction (share of covers), the one fraction
(whether ``x`` follows) and the permutation weights of every subset size, extending the path at
each split, unwinding a feature met again, and summing at each leaf; O(T L D^2).

``algorithm="linear"`` (the default, about ten times faster) follows the idea of Linear
TreeShap (Yu, Xu, Bifet, Read 2022, NeurIPS): write the Shapley weights as an integral of a
polynomial that summarises the path, which makes the walk O(T L D). Our own arrangement of it:
per leaf ``v`` with unique path features ``P`` (``d`` of them), zero fractions ``z_k`` and one
fractions ``o_k``, the weight ``s!(d-1-s)!/d!`` is the Beta integral of ``t^s (1-t)^(d-1-s)``
over [0, 1], so

    phi_i(v) = value_v (o_i - z_i) * integral_0^1 G_v(t) / q_i(t) dt,
    q_k(t) = z_k + (o_k - z_k) t,   G_v(t) = prod_{k in P} q_k(t).

``G`` is held by its values at ``K = ceil(D/2)`` Gauss-Legendre nodes on [0, 1] (products and
exact divisions are pointwise; the quadrature is exact for the quotient, of degree < D), the
leaves' ``value * G`` are summed bottom-up, and each split edge of feature ``i`` receives the
integral over the leaves below it for which it is the last split on ``i`` (the sum under the
edge minus the sums under the next splits on ``i``). The walk visits every node whatever the
row, so a block of rows goes through each tree together, the rows being the vectorised inner
axis. Both algorithms give the same numbers to rounding (the tests check both against
brute-force Shapley values and XGBoost's own).

Interactions are the Shapley interaction values of Lundberg et al. (2020): for ``i != j``,
``Phi_ij = (phi_i(x_j known) - phi_i(x_j unknown)) / 2`` from the walk conditioned on ``j``
(at splits on ``j`` follow ``x`` only, or average by cover, and leave ``j`` out of the
players), made exactly symmetric; the diagonal is the main effect
``phi_i - sum_{j != i} Phi_ij``, so each row sums to the contribution.
"""

from __future__ import annotations

import math
import threading
import weakref
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numba
import numpy as np

from ..errors import CancelledError, SettingError
from ..forest import COMPARE_LT_FLOAT32, LINK_LOGISTIC, LINK_MEAN, Forest
from ..traversal import goes_left

ALGORITHMS = ("linear", "path")
DEFAULT_CHUNK_ROWS = 2048  # rows explained at once: the working memory stays flat in n
ROW_BLOCK = 64  # rows the linear walk carries through a tree together (vectorised)
WORK_ENTRIES = 32_768  # bound on (levels x quadrature nodes x values x rows) per block

OUTPUT_PROBABILITY = "probability"
OUTPUT_MARGIN = "margin"


# ---------------------------------------------------------------------------- results
@dataclass
class Contributions:
    """Per-case Shapley values of the ensemble's own output.

    Attributes
    ----------
    values : ndarray, shape (n, n_features, n_outputs)
        Contribution of each feature to each output, per case.
    base : ndarray, shape (n_outputs,)
        The expected output over the trees' training covers (plus the starting score for
        boosting): ``base + values.sum(axis=1)`` is the explained output of each case.
    output : str
        ``"probability"`` (averaging forests: the mean of the trees' class probabilities) or
        ``"margin"`` (boosting: the raw log-odds before the logistic / softmax).
    feature_names : list of str
    output_names : list of str
        What each output column is (a class label, or ``margin(<class>)``).
    algorithm : str
        ``linear`` or ``path`` (both exact; see the module's notes).
    """

    values: np.ndarray
    base: np.ndarray
    output: str
    feature_names: list[str]
    output_names: list[str]
    algorithm: str = "linear"

    @property
    def explained(self) -> np.ndarray:
        """The explained output per case, shape (n, n_outputs): ``base + values.sum(axis=1)``."""
        return self.base[None, :] + self.values.sum(axis=1)

    def to_dict(self) -> dict:
        return {"kind": "contributions", "method": "path-dependent TreeSHAP",
                "algorithm": self.algorithm, "output": self.output,
                "feature_names": list(self.feature_names),
                "output_names": list(self.output_names),
                "base": self.base.tolist(), "values": self.values.tolist()}


@dataclass(frozen=True)
class InteractionPair:
    """One pair of features and its mean absolute interaction (off-diagonal, both halves)."""

    first: str
    second: str
    mean_abs: float

    def to_dict(self) -> dict:
        return {"first": self.first, "second": self.second, "mean_abs": self.mean_abs}


# ---------------------------------------------------------------------------- kernels
# Both walks are iterative (an explicit stack of levels, one per depth): numba compiles
# recursion poorly, and per-level copies of the path state are what Algorithm 2's "copy m"
# asks for. ``x`` is one row already in the comparison's float type; ``phi`` is (p, outputs).

@numba.njit(cache=True, nogil=True)
def _tree_linear(XT, nb, feature, dec, left, right, frac, value, root, col,
                 strict, cond, cond_on, scale, tq, wq, phiT,
                 G, IQ, S, R, O, SO, GL, node, phase, efeat, slev, sz, Z,
                 lastlev):  # pragma: no cover - compiled
    """Add one tree's Shapley values (times ``scale``) for a block of ``nb`` rows into ``phiT``.

    The walk visits every node in the same order whatever the row (path-dependent TreeSHAP
    averages over both children), so it runs once per tree for a block of rows, the rows
    being the innermost (vectorised) axis. ``XT`` is (p, rows), ``phiT`` (p, outputs, rows).

    Per level ``L`` (the node reached by the L-th split of the walk) and row: ``G[L]`` is the
    product of the path features' factors ``q(t) = z + (o - z) t`` at the quadrature nodes,
    ``IQ[L]`` the inverse of the factor of the feature split on just above (0 where it is 0),
    ``S[L]`` the sum of ``value * G`` over the leaves below and ``R[L]`` that sum under the
    next splits on the same feature below. Per feature: ``Z`` the zero fraction (the same for
    every row), ``O`` the one fraction (0 or 1 per row), ``lastlev`` the level of its last split
    on the path; they must be 1, 1, -1 on entry and are left so. ``cond >= 0`` conditions on
    that feature: known (``cond_on``: a row follows its own side only) or unknown (average by
    cover); it is then not a player.
    """
    K = tq.shape[0]
    V = value.shape[1]
    L = 0
    node[0] = root
    phase[0] = 0
    for k in range(K):
        for b in range(nb):
            G[0, k, b] = 1.0
    while True:
        n = node[L]
        if left[n] < 0:
            for k in range(K):
                for v in range(V):
                    val = value[n, v]
                    for b in range(nb):
                        S[L, k, v, b] = G[L, k, b] * val
        else:
            ph = phase[L]
            if ph < 2:
                f = feature[n]
                if ph == 0:
                    for b in range(nb):
                        GL[L, b] = 1.0 if goes_left(XT[f, b], n, dec, strict) else 0.0
                is_left = ph == 0
                child = left[n] if is_left else right[n]
                phase[L] = ph + 1
                L1 = L + 1
                if f == cond:
                    if cond_on:
                        for k in range(K):
                            for b in range(nb):
                                h = GL[L, b] if is_left else 1.0 - GL[L, b]
                                G[L1, k, b] = G[L, k, b] * h
                    else:
                        m = frac[child]
                        for k in range(K):
                            for b in range(nb):
                                G[L1, k, b] = G[L, k, b] * m
                    efeat[L1] = -1
                else:
                    z_old = Z[f]
                    z_new = z_old * frac[child]
                    up = lastlev[f]
                    for b in range(nb):
                        h = GL[L, b] if is_left else 1.0 - GL[L, b]
                        SO[L1, b] = O[f, b]
                        O[f, b] = O[f, b] * h
                    for k in range(K):
                        t = tq[k]
                        q1 = z_new + (1.0 - z_new) * t  # x follows every split on f so far
                        q0 = z_new * (1.0 - t)  # it does not
                        iq1 = 1.0 / q1
                        iq0 = 1.0 / q0 if q0 > 0.0 else 0.0  # rows with G = 0 from here on
                        for b in range(nb):
                            hot = O[f, b] != 0.0
                            iq = iq1 if hot else iq0
                            IQ[L1, k, b] = iq
                            g = G[L, k, b] * (q1 if hot else q0)
                            if up >= 1:
                                g *= IQ[up, k, b]  # the previous split on f's factor goes
                            G[L1, k, b] = g
                    sz[L1] = z_old
                    Z[f] = z_new
                    slev[L1] = up
                    lastlev[f] = L1
                    efeat[L1] = f
                node[L1] = child
                phase[L1] = 0
                for k in range(K):
                    for v in range(V):
                        for b in range(nb):
                            S[L1, k, v, b] = 0.0
                            R[L1, k, v, b] = 0.0
                L = L1
                continue
        # node at level L is complete: S[L] holds the sum of value * G over its leaves
        if L == 0:
            break
        f = efeat[L]
        if f >= 0:
            z = Z[f]
            for v in range(V):
                for b in range(nb):
                    acc = 0.0
                    for k in range(K):
                        acc += wq[k] * (S[L, k, v, b] - R[L, k, v, b]) * IQ[L, k, b]
                    phiT[f, col + v, b] += scale * (O[f, b] - z) * acc
            up = slev[L]
            if up >= 1:  # the previous split on f: these leaves are not its own
                for k in range(K):
                    for v in range(V):
                        for b in range(nb):
                            R[up, k, v, b] += S[L, k, v, b]
            Z[f] = sz[L]
            for b in range(nb):
                O[f, b] = SO[L, b]
            lastlev[f] = up
        for k in range(K):
            for v in range(V):
                for b in range(nb):
                    S[L - 1, k, v, b] += S[L, k, v, b]
        L -= 1


@numba.njit(cache=True, nogil=True)
def _extend(pd, pz, po, pw, ln, z, o, f):  # pragma: no cover - compiled
    """EXTEND of Algorithm 2: add feature ``f`` (fractions z, o) to a path of length ``ln``."""
    pd[ln] = f
    pz[ln] = z
    po[ln] = o
    pw[ln] = 1.0 if ln == 0 else 0.0
    for i in range(ln - 1, -1, -1):
        pw[i + 1] += o * pw[i] * (i + 1) / (ln + 1)
        pw[i] = z * pw[i] * (ln - i) / (ln + 1)


@numba.njit(cache=True, nogil=True)
def _unwind(pd, pz, po, pw, ud, idx):  # pragma: no cover - compiled
    """UNWIND of Algorithm 2: remove element ``idx`` from a path whose last index is ``ud``."""
    o = po[idx]
    z = pz[idx]
    nxt = pw[ud]
    for i in range(ud - 1, -1, -1):
        if o != 0.0:
            tmp = pw[i]
            pw[i] = nxt * (ud + 1) / ((i + 1) * o)
            nxt = tmp - pw[i] * z * (ud - i) / (ud + 1)
        else:
            pw[i] = pw[i] * (ud + 1) / (z * (ud - i))
    for i in range(idx, ud):
        pd[i] = pd[i + 1]
        pz[i] = pz[i + 1]
        po[i] = po[i + 1]


@numba.njit(cache=True, nogil=True)
def _unwound_sum(pz, po, pw, ud, idx):  # pragma: no cover - compiled
    """Sum of the weights of the path with element ``idx`` unwound (the path is unchanged)."""
    o = po[idx]
    z = pz[idx]
    nxt = pw[ud]
    total = 0.0
    for i in range(ud - 1, -1, -1):
        if o != 0.0:
            tmp = nxt * (ud + 1) / ((i + 1) * o)
            total += tmp
            nxt = pw[i] - tmp * z * (ud - i) / (ud + 1)
        else:
            total += pw[i] * (ud + 1) / (z * (ud - i))
    return total


@numba.njit(cache=True, nogil=True)
def _tree_path(x, feature, dec, left, right, frac, value, root, col,
               strict, cond, cond_on, scale, phi,
               pd, pz, po, pw, ulen, node, phase, hot, cf, iz, io):  # pragma: no cover
    """Add one tree's Shapley values for row ``x`` (times ``scale``) into ``phi`` (Algorithm 2)."""
    V = value.shape[1]
    L = 0
    node[0] = root
    phase[0] = 0
    cf[0] = 1.0
    _extend(pd[0], pz[0], po[0], pw[0], 0, 1.0, 1.0, -1)
    ulen[0] = 1
    while L >= 0:
        n = node[L]
        if left[n] < 0:
            ud = ulen[L] - 1
            for i in range(1, ud + 1):
                w = _unwound_sum(pz[L], po[L], pw[L], ud, i)
                s = scale * w * (po[L, i] - pz[L, i]) * cf[L]
                fi = pd[L, i]
                for v in range(V):
                    phi[fi, col + v] += s * value[n, v]
            L -= 1
            continue
        ph = phase[L]
        if ph >= 2:
            L -= 1
            continue
        f = feature[n]
        if ph == 0:
            if goes_left(x[f], n, dec, strict):
                hot[L] = left[n]
            else:
                hot[L] = right[n]
            iz[L] = 1.0
            io[L] = 1.0
            if f != cond:
                ud = ulen[L] - 1
                for k in range(1, ud + 1):
                    if pd[L, k] == f:
                        iz[L] = pz[L, k]
                        io[L] = po[L, k]
                        _unwind(pd[L], pz[L], po[L], pw[L], ud, k)
                        ulen[L] = ud
                        break
        child = left[n] if ph == 0 else right[n]
        phase[L] = ph + 1
        is_hot = child == hot[L]
        L1 = L + 1
        if f == cond:
            if cond_on:
                if not is_hot:
                    continue
                c = cf[L]
            else:
                c = cf[L] * frac[child]
                if c == 0.0:
                    continue
            ln = ulen[L]
            for i in range(ln):
                pd[L1, i] = pd[L, i]
                pz[L1, i] = pz[L, i]
                po[L1, i] = po[L, i]
                pw[L1, i] = pw[L, i]
            ulen[L1] = ln
            cf[L1] = c
        else:
            z = iz[L] * frac[child]
            o = io[L] if is_hot else 0.0
            if z == 0.0 and o == 0.0:
                continue  # this subtree adds nothing
            ln = ulen[L]
            for i in range(ln):
                pd[L1, i] = pd[L, i]
                pz[L1, i] = pz[L, i]
                po[L1, i] = po[L, i]
                pw[L1, i] = pw[L, i]
            _extend(pd[L1], pz[L1], po[L1], pw[L1], ln, z, o, f)
            ulen[L1] = ln + 1
            cf[L1] = cf[L]
        node[L1] = child
        phase[L1] = 0
        L = L1


@numba.njit(cache=True, nogil=True)
def _linear_workspace(depth, K, V, p, B):  # pragma: no cover - compiled
    """Work space of ``_tree_linear`` for blocks of up to ``B`` rows."""
    D1 = depth + 2
    i64 = np.int64
    Z = np.ones(p)
    O = np.ones((p, B))
    lastlev = np.full(p, -1, dtype=i64)
    return (np.empty((D1, K, B)), np.empty((D1, K, B)), np.empty((D1, K, V, B)),
            np.empty((D1, K, V, B)), O, np.empty((D1, B)), np.empty((D1, B)),
            np.empty(D1, dtype=i64), np.empty(D1, dtype=i64), np.empty(D1, dtype=i64),
            np.empty(D1, dtype=i64), np.empty(D1), Z, lastlev)


@numba.njit(cache=True, nogil=True)
def _block_start(X, blk, B, depth, K, V, n_out):  # pragma: no cover - compiled
    """Block ``blk`` of ``B`` rows: its first row, its size, its rows as a (p, B) array (rows
    along the last axis), a zeroed (p, outputs, B) result and the walk's work space."""
    n, p = X.shape
    b0 = blk * B
    nb = min(B, n - b0)
    XT = np.zeros((p, B))
    for b in range(nb):
        for j in range(p):
            XT[j, b] = X[b0 + b, j]
    return b0, nb, XT, np.zeros((p, n_out, B)), _linear_workspace(depth, K, V, p, B)


@numba.njit(cache=True, nogil=True)
def _path_workspace(depth):  # pragma: no cover - compiled
    """One row's work space for ``_tree_path`` (a path of up to depth + 2 elements per level)."""
    D1 = depth + 2
    i64 = np.int64
    return (np.empty((D1, D1), dtype=i64), np.empty((D1, D1)), np.empty((D1, D1)),
            np.empty((D1, D1)), np.empty(D1, dtype=i64), np.empty(D1, dtype=i64),
            np.empty(D1, dtype=i64), np.empty(D1, dtype=i64), np.empty(D1), np.empty(D1),
            np.empty(D1))


# One parallel kernel per walk and result: the prange body calls the walk directly, which
# keeps numba's compile time (once, then cached on disk) to a few seconds per kernel.

@numba.njit(cache=True, nogil=True, parallel=True)
def _linear_rows(X, feature, dec, left, right, frac, value, roots, cols,
                 strict, depth, tq, wq, B, out):  # pragma: no cover - compiled
    """Shapley values of every row of ``X`` into ``out`` (n, p, outputs), linear walk.

    Rows go in fixed blocks of ``B`` (threads take whole blocks); a row's numbers depend
    neither on its block nor on the thread count.
    """
    n, p = X.shape
    n_out = out.shape[2]
    for blk in numba.prange((n + B - 1) // B):
        b0, nb, XT, phiT, ws = _block_start(X, blk, B, depth, tq.shape[0], value.shape[1],
                                            n_out)
        for t in range(roots.shape[0]):
            _tree_linear(XT, nb, feature, dec, left, right, frac, value,
                         roots[t], cols[t], strict, -1, False, 1.0, tq, wq, phiT, *ws)
        for b in range(nb):
            for j in range(p):
                for c in range(n_out):
                    out[b0 + b, j, c] = phiT[j, c, b]


@numba.njit(cache=True, nogil=True, parallel=True)
def _path_rows(X, feature, dec, left, right, frac, value, roots, cols,
               strict, depth, tq, wq, B, out):  # pragma: no cover - compiled
    """Shapley values of every row of ``X`` into ``out`` (n, p, outputs), Algorithm 2 (row by
    row; ``tq``, ``wq`` and ``B`` are not used)."""
    n = X.shape[0]
    for r in numba.prange(n):
        ws = _path_workspace(depth)
        phi = out[r]
        phi[:] = 0.0
        for t in range(roots.shape[0]):
            _tree_path(X[r], feature, dec, left, right, frac, value,
                       roots[t], cols[t], strict, -1, False, 1.0, phi, *ws)


@numba.njit(cache=True, nogil=True)
def _add_column(M, half, j):  # pragma: no cover - compiled
    """Add ``half`` (one tree's conditioned difference for feature j) to column j of ``M``."""
    for i in range(M.shape[0]):
        for c in range(M.shape[2]):
            M[i, j, c] += half[i, c]


@numba.njit(cache=True, nogil=True)
def _symmetric_with_main_effects(M, phi):  # pragma: no cover - compiled
    """Make ``M`` (p, p, outputs) exactly symmetric and put the main effects on its diagonal."""
    p = M.shape[0]
    for i in range(p):
        for j in range(i + 1, p):
            for c in range(M.shape[2]):
                s = 0.5 * (M[i, j, c] + M[j, i, c])
                M[i, j, c] = s
                M[j, i, c] = s
    for i in range(p):
        for c in range(M.shape[2]):
            rest = 0.0
            for j in range(p):
                if j != i:
                    rest += M[i, j, c]
            M[i, i, c] = phi[i, c] - rest


@numba.njit(cache=True, nogil=True, parallel=True)
def _linear_interaction_rows(X, feature, dec, left, right, frac, value,
                             roots, cols, strict, depth, tq, wq, B, tf_ptr, tf_idx,
                             out):  # pragma: no cover - compiled
    """Shapley interaction values of every row of ``X`` into ``out`` (n, p, p, outputs)."""
    n, p = X.shape
    n_out = out.shape[3]
    for blk in numba.prange((n + B - 1) // B):
        b0, nb, XT, phiT, ws = _block_start(X, blk, B, depth, tq.shape[0], value.shape[1],
                                            n_out)
        halfT = np.zeros((p, n_out, B))
        M = out[b0:b0 + nb]
        M[:] = 0.0
        for t in range(roots.shape[0]):
            _tree_linear(XT, nb, feature, dec, left, right, frac, value,
                         roots[t], cols[t], strict, -1, False, 1.0, tq, wq, phiT, *ws)
            for a in range(tf_ptr[t], tf_ptr[t + 1]):
                j = tf_idx[a]  # column j: (phi_i(x_j known) - phi_i(x_j unknown)) / 2
                for known in (True, False):
                    _tree_linear(XT, nb, feature, dec, left, right, frac,
                                 value, roots[t], cols[t], strict, j, known,
                                 0.5 if known else -0.5, tq, wq, halfT, *ws)
                for a2 in range(tf_ptr[t], tf_ptr[t + 1]):
                    i = tf_idx[a2]  # only this tree's features can have a share
                    for c in range(n_out):
                        for b in range(nb):
                            M[b, i, j, c] += halfT[i, c, b]
                            halfT[i, c, b] = 0.0
        phi = np.empty((p, n_out))
        for b in range(nb):
            for j in range(p):
                for c in range(n_out):
                    phi[j, c] = phiT[j, c, b]
            _symmetric_with_main_effects(M[b], phi)


@numba.njit(cache=True, nogil=True, parallel=True)
def _path_interaction_rows(X, feature, dec, left, right, frac, value,
                           roots, cols, strict, depth, tq, wq, B, tf_ptr, tf_idx,
                           out):  # pragma: no cover - compiled
    """As ``_linear_interaction_rows``, with Algorithm 2's walk."""
    n, p = X.shape
    n_out = out.shape[3]
    for r in numba.prange(n):
        ws = _path_workspace(depth)
        x = X[r]
        M = out[r]
        M[:] = 0.0
        phi = np.zeros((p, n_out))
        half = np.empty((p, n_out))
        for t in range(roots.shape[0]):
            _tree_path(x, feature, dec, left, right, frac, value,
                       roots[t], cols[t], strict, -1, False, 1.0, phi, *ws)
            for a in range(tf_ptr[t], tf_ptr[t + 1]):
                j = tf_idx[a]
                half[:] = 0.0
                for known in (True, False):
                    _tree_path(x, feature, dec, left, right, frac, value,
                               roots[t], cols[t], strict, j, known, 0.5 if known else -0.5,
                               half, *ws)
                _add_column(M, half, j)
        _symmetric_with_main_effects(M, phi)


@numba.njit(cache=True, nogil=True)
def _expected_values(left, right, frac, value, roots):  # pragma: no cover - compiled
    """Per tree, the cover-weighted mean of its leaf values (the walk with no feature known)."""
    n_trees = roots.shape[0]
    V = value.shape[1]
    out = np.zeros((n_trees, V))
    stack = np.empty(left.shape[0], dtype=np.int64)
    weight = np.empty(left.shape[0])
    for t in range(n_trees):
        top = 0
        stack[0] = roots[t]
        weight[0] = 1.0
        while top >= 0:
            k = stack[top]
            w = weight[top]
            top -= 1
            if left[k] < 0:
                for v in range(V):
                    out[t, v] += w * value[k, v]
            else:
                for c in (left[k], right[k]):
                    top += 1
                    stack[top] = c
                    weight[top] = w * frac[c]
    return out


# ---------------------------------------------------------------------------- preparation
@dataclass(frozen=True, eq=False)
class _Prepared:
    """A forest's nodes laid out for the walks (built once per Forest, kept while it lives)."""

    feature: np.ndarray
    dec: tuple  # Forest.decision_arrays
    left: np.ndarray
    right: np.ndarray
    frac: np.ndarray  # cover(node) / cover(parent); 1 at roots; 0 under a zero-cover parent
    value: np.ndarray  # (nodes, V), already divided by the tree count for the mean link
    roots: np.ndarray
    cols: np.ndarray  # first output column each tree's values add to
    strict: bool
    depth: int
    base: np.ndarray  # (n_outputs,)
    tf_ptr: np.ndarray  # features each tree splits on (CSR), for the interactions
    tf_idx: np.ndarray
    tq: np.ndarray  # quadrature nodes and weights of the linear walk
    wq: np.ndarray
    block: int  # rows per block of the linear walk


_PREPARED: "weakref.WeakKeyDictionary[Forest, _Prepared]" = weakref.WeakKeyDictionary()
_PREPARED_LOCK = threading.Lock()


def _prepare(forest: Forest) -> _Prepared:
    with _PREPARED_LOCK:
        prep = _PREPARED.get(forest)
        if prep is None:
            prep = _build(forest)
            _PREPARED[forest] = prep
        return prep


def _build(forest: Forest) -> _Prepared:
    flat = forest._flat
    roots = flat["offsets"]
    left, right = flat["left"], flat["right"]
    cover = np.concatenate([t.cover for t in forest.trees]).astype(np.float64)
    frac = np.ones(cover.shape[0])
    internal = np.flatnonzero(left >= 0)
    parent_cover = cover[internal]
    safe = np.where(parent_cover > 0, parent_cover, 1.0)
    for side in (left, right):
        frac[side[internal]] = np.where(parent_cover > 0, cover[side[internal]] / safe, 0.0)
    if forest.link == LINK_MEAN:
        value = np.concatenate([t.value for t in forest.trees]).astype(np.float64)
        value = value / forest.n_trees
        cols = np.zeros(forest.n_trees, dtype=np.int64)
    else:
        value = np.concatenate([t.value[:, :1] for t in forest.trees]).astype(np.float64)
        cols = np.array([t.output for t in forest.trees], dtype=np.int64)
    value = np.ascontiguousarray(value)
    expected = _expected_values(left, right, frac, value, roots)
    base = np.zeros(forest.n_outputs)
    if forest.link == LINK_MEAN:
        base += expected.sum(axis=0)
    else:
        base += forest.base_score
        np.add.at(base, cols, expected[:, 0])
    tq, wq = _quadrature(int(forest.max_depth))
    ptr, idx = [0], []
    for t in forest.trees:
        used = np.unique(t.feature[t.feature >= 0])
        idx.extend(used.tolist())
        ptr.append(len(idx))
    return _Prepared(
        feature=flat["feature"], dec=forest.decision_arrays, left=left, right=right, frac=frac, value=value, roots=roots, cols=cols,
        strict=forest.compare == COMPARE_LT_FLOAT32, depth=int(forest.max_depth), base=base,
        tf_ptr=np.asarray(ptr, dtype=np.int64), tf_idx=np.asarray(idx, dtype=np.int64),
        tq=tq, wq=wq, block=_block_rows(int(forest.max_depth), tq.shape[0], value.shape[1]))


def _block_rows(depth: int, K: int, V: int) -> int:
    """Rows per block of the linear walk: 64, fewer for deep trees (work space under 1 MB)."""
    return max(1, min(ROW_BLOCK, WORK_ENTRIES // ((depth + 2) * K * V)))


def _quadrature(depth: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [0, 1]: ceil(depth / 2) nodes integrate exactly the
    polynomials of degree < depth that the linear walk integrates."""
    k = max(1, math.ceil(depth / 2))
    t, w = np.polynomial.legendre.leggauss(k)
    return 0.5 * (t + 1.0), 0.5 * w


def output_names(forest: Forest) -> list[str]:
    """What each output column of the contributions is."""
    labels = [str(c) for c in forest.classes_]
    if forest.link == LINK_MEAN:
        return labels
    if forest.link == LINK_LOGISTIC:
        return [f"margin({labels[1]})"]
    return [f"margin({c})" for c in labels]


# ---------------------------------------------------------------------------- API
def _check_settings(algorithm: str, jobs, chunk_rows) -> int:
    if algorithm not in ALGORITHMS:
        raise SettingError(f"algorithm={algorithm!r} is not known; use one of {ALGORITHMS}")
    ok = isinstance(chunk_rows, (int, np.integer)) and not isinstance(chunk_rows, bool)
    if not ok or chunk_rows < 1:
        raise SettingError(f"chunk_rows={chunk_rows!r} must be a whole number of at least 1")
    cores = numba.config.NUMBA_NUM_THREADS
    ok = jobs is None or (isinstance(jobs, (int, np.integer)) and not isinstance(jobs, bool))
    if not ok or (jobs is not None and jobs < 0):
        raise SettingError(f"jobs={jobs!r} must be a whole number: 1 or more threads, or 0 / "
                           f"None for one per CPU core ({cores})")
    return cores if not jobs else min(int(jobs), cores)


def _run_chunks(forest: Forest, X, kernel, out_shape, *, algorithm, jobs, progress, cancel,
                chunk_rows, extra=()) -> tuple[np.ndarray, _Prepared]:
    threads = _check_settings(algorithm, jobs, chunk_rows)
    X = forest.check_X(X)
    prep = _prepare(forest)
    extra_args = extra(prep) if callable(extra) else tuple(extra)
    n = X.shape[0]
    out = np.empty((n, *out_shape))
    before = numba.get_num_threads()
    numba.set_num_threads(threads)
    try:
        for s in range(0, n, chunk_rows):
            if cancel is not None and cancel.is_set():
                raise CancelledError(f"explaining the cases was cancelled after {s:,} of "
                                     f"{n:,} rows; nothing was kept.")
            e = min(n, s + chunk_rows)
            Xc = np.ascontiguousarray(forest.compare_input(X[s:e]))
            kernel(Xc, prep.feature, prep.dec, prep.left, prep.right,
                   prep.frac, prep.value, prep.roots, prep.cols, prep.strict, prep.depth,
                   prep.tq, prep.wq, min(prep.block, e - s), *extra_args, out[s:e])
            if progress is not None:
                progress(e, n)
    finally:
        numba.set_num_threads(before)
    return out, prep


def contributions(forest: Forest, X, *, jobs: int | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  cancel: threading.Event | None = None,
                  chunk_rows: int = DEFAULT_CHUNK_ROWS,
                  algorithm: str = "linear") -> Contributions:
    """Exact path-dependent TreeSHAP contributions of every feature, for every case.

    Parameters
    ----------
    forest : Forest
    X : array-like, shape (n, n_features) or (n_features,)
        The cases; NaN is a missing value and goes where each split sends missing values.
    jobs : int, optional
        Threads over rows (None or 0: one per CPU core). The numbers do not depend on it.
    progress : callable, optional
        ``progress(done_rows, total_rows)`` after each chunk of rows.
    cancel : threading.Event, optional
        Checked between chunks; once set, :class:`~grovewise.errors.CancelledError` is raised.
    chunk_rows : int
        Rows explained at once (bounds the working memory besides the result).
    algorithm : {"linear", "path"}
        Both exact; ``linear`` is faster (see the module's notes).

    Returns
    -------
    Contributions
        ``base + values.sum(axis=1)`` equals ``forest.decision_function(X)`` (the mean
        probabilities for averaging forests, the raw margin for boosting).
    """
    p, n_out = forest.n_features, forest.n_outputs
    kernel = _linear_rows if algorithm == "linear" else _path_rows
    values, prep = _run_chunks(forest, X, kernel, (p, n_out), algorithm=algorithm,
                               jobs=jobs, progress=progress, cancel=cancel,
                               chunk_rows=chunk_rows)
    return Contributions(
        values=values, base=prep.base.copy(),
        output=OUTPUT_PROBABILITY if forest.link == LINK_MEAN else OUTPUT_MARGIN,
        feature_names=list(forest.feature_names), output_names=output_names(forest),
        algorithm=algorithm)


def interactions(forest: Forest, X, *, jobs: int | None = None,
                 progress: Callable[[int, int], None] | None = None,
                 cancel: threading.Event | None = None,
                 chunk_rows: int = 256, algorithm: str = "linear",
                 features: Sequence[int] | None = None) -> np.ndarray:
    """Shapley interaction values (Lundberg et al. 2020), shape (n, p, p, n_outputs).

    ``[r, i, j, c]`` for ``i != j`` is half of the interaction of features i and j in case r
    (the matrix is symmetric, the two halves add up to the whole); the diagonal is the main
    effect, so ``values.sum(axis=2)`` equals :func:`contributions`' values. Outputs as in
    :func:`contributions`. The cost is about ``2 x (features per tree)`` times that of the
    contributions. Parameters as for :func:`contributions`, and ``features``: compute only
    the pairs among these feature indices (the cost then grows with their number, not with
    every feature a tree uses); the other entries are 0 and the diagonal is then not the
    main effect.
    """
    p, n_out = forest.n_features, forest.n_outputs
    kernel = (_linear_interaction_rows if algorithm == "linear"
              else _path_interaction_rows)

    def pairs_of(prep):
        if features is None:
            return prep.tf_ptr, prep.tf_idx
        keep = np.isin(prep.tf_idx, np.asarray(list(features), dtype=np.int64))
        kept = np.concatenate([[0], np.cumsum(keep)]).astype(np.int64)
        return kept[prep.tf_ptr], prep.tf_idx[keep]

    values, _ = _run_chunks(forest, X, kernel, (p, p, n_out), algorithm=algorithm,
                            jobs=jobs, progress=progress, cancel=cancel, chunk_rows=chunk_rows,
                            extra=pairs_of)
    return values


def interaction_ranking(values: np.ndarray, feature_names: Sequence[str], *,
                        output: int | None = None) -> list[InteractionPair]:
    """Feature pairs ``i < j`` by mean absolute interaction over the cases, largest first.

    ``values`` is the (n, p, p, n_outputs) array of :func:`interactions`. The figure of a pair
    is the mean over cases of ``|Phi_ij| + |Phi_ji|`` (the whole interaction, both symmetric
    halves), summed over the outputs when ``output`` is None, else for that output column
    only. Ties keep the order of the features.
    """
    values = np.asarray(values, dtype=np.float64)
    if values.ndim != 4 or values.shape[1] != values.shape[2]:
        raise SettingError(f"interaction values of shape {values.shape} are not (n, p, p, "
                           "outputs); give the array interactions() returns")
    p = values.shape[1]
    if len(feature_names) != p:
        raise SettingError(f"{len(feature_names)} feature names were given for {p} features")
    if output is None:
        mean_abs = np.abs(values).mean(axis=0).sum(axis=2)
    else:
        if not 0 <= output < values.shape[3]:
            raise SettingError(f"output={output} is outside 0..{values.shape[3] - 1}")
        mean_abs = np.abs(values[..., output]).mean(axis=0)
    mean_abs = mean_abs + mean_abs.T
    i, j = np.triu_indices(p, k=1)
    order = np.argsort(-mean_abs[i, j], kind="stable")
    return [InteractionPair(str(feature_names[i[k]]), str(feature_names[j[k]]),
                            float(mean_abs[i[k], j[k]])) for k in order]
