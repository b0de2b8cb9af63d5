"""Whole-grid evaluators: score every value of one hyperparameter from a single fit.

Each function reproduces what separate scikit-learn fits would predict for every
grid value, while fitting (or decomposing) only once:

* regression trees: weakest-link (cost-complexity) pruning replayed on the
  unpruned tree, bit-for-bit equal to refits with ``ccp_alpha``;
* random forests: running prefix means over the fitted trees, bit-for-bit equal
  to forests with fewer ``n_estimators``;
* ridge: one SVD of the centred design shared by all ``alpha`` values;
* lasso / elastic net: one coordinate-descent path per ``l1_ratio``.

Only numpy and scikit-learn are imported; the functions are pure.
"""

import numpy as np
from sklearn.linear_model import enet_path
from sklearn.utils.validation import check_array, check_is_fitted

_LEAF = -1  # scikit-learn's marker for "no child" in tree_.children_left/right


# --------------------------------------------------------------------------
# Regression trees: cost-complexity pruning replayed from one unpruned fit
# --------------------------------------------------------------------------


def _check_unpruned(tree):
    """Reject estimators whose tree is not the single-output, unpruned one we replay."""
    check_is_fitted(tree, "tree_")
    if tree.ccp_alpha != 0.0:
        raise ValueError("the tree must be fitted with ccp_alpha=0 (unpruned)")
    if tree.n_outputs_ != 1:
        raise ValueError("only single-output trees are supported")


def _parents(t):
    """Parent id of every node (-1 for the root), from the child arrays."""
    parent = np.full(t.node_count, -1, dtype=np.intp)
    internal = np.flatnonzero(t.children_left != _LEAF)
    parent[t.children_left[internal]] = internal
    parent[t.children_right[internal]] = internal
    return parent


def _weakest_link_sequence(t, parent):
    """Replay scikit-learn's weakest-link loop; return (effective alphas, pruned node ids)."""
    # Mirrors _cost_complexity_prune in sklearn/tree/_tree.pyx operation for
    # operation so every floating-point value matches: node risk
    # w * impurity / w_root, branch risks summed leaf by leaf in increasing leaf
    # id, the smallest effective alpha chosen with ties going to the lowest node
    # id, ancestors updated by += r_diff after each pruning.  Only ancestors'
    # alphas are recomputed per step; the others are unchanged, so none differs.
    n = t.node_count
    left, right = t.children_left, t.children_right
    w = t.weighted_n_node_samples
    r_node = w * t.impurity / w[0]
    is_leaf = left == _LEAF
    leaves = np.flatnonzero(is_leaf)

    # (ancestor, leaf) pairs, ordered by leaf id so that bincount adds each
    # ancestor's leaf risks in the library's order (bincount sums sequentially).
    anc_parts, leaf_parts = [], []
    cur, ids = leaves, leaves
    while cur.size:
        keep = cur != 0
        cur, ids = parent[cur[keep]], ids[keep]
        anc_parts.append(cur)
        leaf_parts.append(ids)
    anc = np.concatenate(anc_parts)
    order = np.argsort(np.concatenate(leaf_parts), kind="stable")
    anc = anc[order]
    leaf_of_pair = np.concatenate(leaf_parts)[order]
    r_branch = np.bincount(anc, weights=r_node[leaf_of_pair], minlength=n)
    r_branch[leaves] = r_node[leaves]
    n_leaves = np.bincount(anc, minlength=n)

    # Effective alpha of every candidate (inf once a node is no candidate);
    # np.argmin returns the first minimum, i.e. the lowest node id on ties,
    # exactly like the library's strict "<" scan.
    score = np.full(n, np.inf)
    internal = ~is_leaf
    score[internal] = (r_node[internal] - r_branch[internal]) / (n_leaves[internal] - 1)

    # Plain Python floats/ints below: IEEE double arithmetic, same as the C loop.
    r_node_l, r_branch_l = r_node.tolist(), r_branch.tolist()
    n_leaves_l, parent_l = n_leaves.tolist(), parent.tolist()
    left_l, right_l = left.tolist(), right.tolist()
    in_subtree = [True] * n
    alphas, pruned = [], []
    while left_l[0] != _LEAF:
        p = int(np.argmin(score))
        if score[p] == np.inf:
            break
        alphas.append(float(score[p]))
        pruned.append(p)
        stack = [p]  # drop the branch below p (already-dropped nodes are skipped)
        while stack:
            node = stack.pop()
            if not in_subtree[node]:
                continue
            in_subtree[node] = False
            score[node] = np.inf
            if left_l[node] != _LEAF:
                stack.append(left_l[node])
                stack.append(right_l[node])
        in_subtree[p] = True
        if p == 0:
            break  # the root is a leaf: the sequence is complete
        n_pruned = n_leaves_l[p] - 1
        n_leaves_l[p] = 0
        r_diff = r_node_l[p] - r_branch_l[p]
        r_branch_l[p] = r_node_l[p]
        node = parent_l[p]
        while node != -1:
            n_leaves_l[node] -= n_pruned
            r_branch_l[node] += r_diff
            score[node] = (r_node_l[node] - r_branch_l[node]) / (n_leaves_l[node] - 1)
            node = parent_l[node]
    return np.asarray(alphas, dtype=np.float64), np.asarray(pruned, dtype=np.intp)


def pruning_alphas(tree):
    """Effective alphas of the weakest-link sequence, as ``cost_complexity_pruning_path`` gives."""
    _check_unpruned(tree)
    seq, _ = _weakest_link_sequence(tree.tree_, _parents(tree.tree_))
    return np.concatenate([[0.0], seq])


def _steps_for(seq, alphas):
    """Number of weakest-link steps a refit with each ``ccp_alpha`` performs."""
    # The library prunes while effective alpha <= ccp_alpha and stops at the first
    # step above it; a running maximum makes that "first exceedance" searchable.
    # ccp_alpha == 0 skips pruning altogether.
    steps = np.searchsorted(np.maximum.accumulate(seq), alphas, side="right")
    return np.where(alphas == 0.0, 0, steps)


def _node_outputs(tree):
    """What each node predicts: its mean for a regression tree; for a classification tree
    its class probabilities, normalised exactly as `predict_proba` normalises a leaf's."""
    t = tree.tree_
    if not hasattr(tree, "classes_"):
        return t.value[:, 0, 0]
    proba = t.value[:, 0, :].copy()
    normalizer = proba.sum(axis=1)[:, None]
    normalizer[normalizer == 0.0] = 1.0
    return proba / normalizer


def pruned_tree_predictions(tree, X, alphas):
    """Predictions (values, or class probabilities of a classification tree) and leaf counts
    of refits with each ``ccp_alpha``, from one unpruned tree."""
    _check_unpruned(tree)
    alphas = np.asarray(alphas, dtype=np.float64).reshape(-1)
    if np.any(~(alphas >= 0.0)):
        raise ValueError("ccp_alpha values must be non-negative")
    t = tree.tree_
    parent = _parents(t)
    seq, pruned = _weakest_link_sequence(t, parent)
    prune_step = np.full(t.node_count, np.iinfo(np.intp).max, dtype=np.intp)
    prune_step[pruned] = np.arange(pruned.size)

    # Nodes grouped by depth, root first, for a top-down sweep.
    levels, frontier = [], np.array([0], dtype=np.intp)
    while frontier.size:
        levels.append(frontier)
        inner = frontier[t.children_left[frontier] != _LEAF]
        frontier = np.concatenate([t.children_left[inner], t.children_right[inner]])
    leaves = np.flatnonzero(t.children_left == _LEAF)
    value = _node_outputs(tree)
    row_leaf = tree.apply(X)  # the estimator's own routing (dtype, NaN handling)

    preds = np.empty((alphas.size, row_leaf.size, *value.shape[1:]), dtype=np.float64)
    n_leaves = np.empty(alphas.size, dtype=np.intp)
    done = {}
    for j, s in enumerate(_steps_for(seq, alphas).tolist()):
        if s not in done:
            # After s steps a leaf of the pruned tree is the topmost node pruned so
            # far on each path; an untouched original leaf stays itself.
            collapsed = prune_step < s
            owner = np.full(t.node_count, -1, dtype=np.intp)
            owner[0] = 0 if collapsed[0] else -1
            for lvl in levels[1:]:
                up = owner[parent[lvl]]
                owner[lvl] = np.where(up >= 0, up, np.where(collapsed[lvl], lvl, -1))
            final = np.where(owner[leaves] >= 0, owner[leaves], leaves)
            node_value = np.empty_like(value)
            node_value[leaves] = value[final]
            done[s] = (node_value[row_leaf], np.unique(final).size)
        preds[j], n_leaves[j] = done[s]
    return preds, n_leaves


# --------------------------------------------------------------------------
# Random forests: prefix means over the fitted trees
# --------------------------------------------------------------------------


def forest_prefix_predictions(forest, X, sizes):
    """Predictions (class probabilities for a classifier) of forests with the first
    ``sizes[i]`` trees, from one fitted forest."""
    check_is_fitted(forest, "estimators_")
    if forest.n_outputs_ != 1:
        raise ValueError("only single-output forests are supported")
    sizes = np.asarray(sizes).reshape(-1)
    n_trees = len(forest.estimators_)
    if sizes.size == 0 or sizes.min() < 1 or sizes.max() > n_trees:
        raise ValueError(f"sizes must lie in [1, {n_trees}]")
    # Cast once to the trees' float32, as the forest's own predict does.
    X = check_array(X, dtype=np.float32, accept_sparse="csr", ensure_all_finite=False)

    classes = getattr(forest, "classes_", None)
    shape = (X.shape[0],) if classes is None else (X.shape[0], len(classes))
    out = np.empty((sizes.size, *shape), dtype=np.float64)
    wanted = {}
    for i, k in enumerate(sizes.tolist()):
        wanted.setdefault(int(k), []).append(i)
    # Same arithmetic as the library: zeros, += each tree in order, /= count (for a
    # classifier the trees' class probabilities, as its predict_proba sums them).
    running = np.zeros(shape, dtype=np.float64)
    for k, est in enumerate(forest.estimators_[: int(sizes.max())], start=1):
        running += est.predict(X) if classes is None else est.predict_proba(X)
        if k in wanted:
            out[wanted[k]] = running / k
    return out


# --------------------------------------------------------------------------
# Linear models: ridge via one SVD, lasso / elastic net via one path
# --------------------------------------------------------------------------


def _centre(X, y):
    """Centre X and y the way linear models with ``fit_intercept=True`` do."""
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if X.ndim != 2 or y.ndim != 1 or X.shape[0] != y.shape[0]:
        raise ValueError("expected X of shape (n, p) and y of shape (n,)")
    X_offset = np.average(X, axis=0)
    y_offset = np.average(y, axis=0)
    return X - X_offset, y - y_offset, X_offset, y_offset


def _penalties(alphas):
    """Penalty grid as a 1-d float64 array."""
    alphas = np.asarray(alphas, dtype=np.float64).reshape(-1)
    if alphas.size == 0 or np.any(~(alphas >= 0.0)):
        raise ValueError("alphas must be a non-empty array of non-negative values")
    return alphas


def ridge_path_coefs(X_train, y_train, alphas):
    """Ridge coefficients and intercepts for every alpha from one SVD of the centred design."""
    alphas = _penalties(alphas)
    Xc, yc, X_offset, y_offset = _centre(X_train, y_train)
    # Same steps as Ridge(solver="svd"): small singular values are dropped.
    U, s, Vt = np.linalg.svd(Xc, full_matrices=False)
    keep = s > 1e-15
    s_nnz = s[keep][:, None]
    UTy = U.T @ yc[:, None]
    coefs = np.empty((alphas.size, Xc.shape[1]), dtype=np.float64)
    for i, a in enumerate(alphas):
        d = np.zeros((s.size, 1), dtype=np.float64)
        d[keep] = s_nnz / (s_nnz**2 + np.array([a]))
        coefs[i] = (Vt.T @ (d * UTy))[:, 0]
    intercepts = np.array([y_offset - X_offset @ c for c in coefs])
    return coefs, intercepts


def elastic_net_path_coefs(
    X_train, y_train, alphas, *, l1_ratio=1.0, tol=1e-4, max_iter=1000
):
    """Elastic-net coefficients and intercepts for every alpha from one descending path."""
    alphas = _penalties(alphas)
    Xc, yc, X_offset, y_offset = _centre(X_train, y_train)
    # The path runs from the largest alpha down with warm starts; solve each
    # distinct alpha once and map back to the caller's order.
    uniq, inverse = np.unique(alphas, return_inverse=True)
    _, path_coefs, _ = enet_path(
        np.asfortranarray(Xc),
        yc,
        l1_ratio=l1_ratio,
        alphas=uniq[::-1],
        precompute="auto",
        tol=tol,
        max_iter=max_iter,
    )
    coefs = path_coefs.T[::-1][inverse]
    intercepts = np.array([y_offset - X_offset @ c for c in coefs])
    return coefs, intercepts
