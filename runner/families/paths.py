"""Whole-grid evaluators: score every value of one hyperparameter from a single fit.

Each function reproduces what separate scikit-learn fits would predict for every
grid value, while fitting (or decomposing) only once:

* regression trees: weakest-link (cost-complexity) pruning replayed on the
  unpruned tree in rounds of many prunings, bit-for-bit equal to refits with
  ``ccp_alpha``; one ``apply`` per evaluation set, then one gather per alpha;
* random forests: running prefix means over the trees, bit-for-bit equal to forests
  with fewer ``n_estimators``, the forest grown a batch of trees at a time and each
  batch let go once read, so that a task holds a few trees, not the forest;
* ridge: one Gram matrix of the centred design shared by all ``alpha`` values, then one
  small Cholesky solve per alpha (the arithmetic of ``Ridge(solver="cholesky")``, which
  is what ``Ridge()`` runs on dense rows);
* lasso / elastic net: one coordinate-descent path per ``l1_ratio``.

Only numpy and scikit-learn are imported; the functions are pure.
"""

import copy
import functools
import warnings
from typing import NamedTuple

import numpy as np
from scipy import linalg
from sklearn.linear_model import Ridge, enet_path
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


def _ancestors(parent, depth: int):
    """Strict ancestors of every node, nearest first: an (n, depth) matrix padded with -1,
    `depth` the tree's (its deepest leaf has that many ancestors), filled column by column."""
    step = np.append(parent, -1).astype(np.int32 if parent.size < 2**31 - 1 else np.intp)
    anc = np.empty((parent.size, max(depth, 1)), dtype=step.dtype)
    anc[:, 0] = step[:-1]
    for j in range(1, depth):
        anc[:, j] = step[anc[:, j - 1]]  # the appended -1 answers -1
    return anc


def _initial_risks(t, anc):
    """Node risks, branch risks and leaf counts before any pruning, as the library sums them
    (each ancestor adds its leaves' risks in increasing leaf id; bincount adds in order)."""
    n = t.node_count
    w = t.weighted_n_node_samples
    r_node = w * t.impurity / w[0]
    leaves = np.flatnonzero(t.children_left == _LEAF)
    r_branch = np.zeros(n)
    n_leaves = np.zeros(n, dtype=np.intp)
    # Leaves a block at a time, in increasing id: np.add.at adds in order as one pass
    # would, and the (leaf, ancestor) pairs of only one block are held at once.
    for block in range(0, leaves.size, _LEAF_BLOCK):
        some = leaves[block:block + _LEAF_BLOCK]
        up = anc[some]
        real = up >= 0
        pair_anc = up[real]  # row by row: leaf ids increase
        np.add.at(r_branch, pair_anc, np.repeat(r_node[some], real.sum(axis=1)))
        np.add.at(n_leaves, pair_anc, 1)
    r_branch[leaves] = r_node[leaves]
    return r_node, r_branch, n_leaves


_LEAF_BLOCK = 8192
"""Leaves per block when a tree's risks are summed over each leaf's ancestors."""


def _preorder_spans(t, leaves_below):
    """Each node's subtree as a half-open span [start, stop) of preorder positions.

    Every split has two children, so a subtree of L leaves holds 2L - 1 nodes
    (`leaves_below`: 0 for a leaf, as `_initial_risks` counts them); the starts are set a
    level at a time from the root down."""
    left, right = t.children_left, t.children_right
    size = np.where(left == _LEAF, 1, 2 * leaves_below - 1)
    start = np.zeros(t.node_count, dtype=np.intp)
    level = np.zeros(1, dtype=np.intp)
    while level.size:
        level = level[left[level] != _LEAF]
        start[left[level]] = start[level] + 1
        start[right[level]] = start[level] + 1 + size[left[level]]
        level = np.concatenate((left[level], right[level]))
    return start, start + size


_SLACK = 1e-9
"""Relative margin by which an ancestor's alpha must exceed a round's prunings: far above the
rounding of its running sums, so its true value cannot reach them within the round."""


def _weakest_link_rounds(t, anc):
    """The weakest-link sequence in rounds of many prunings; returns (effective alphas,
    pruned node ids, leaves each pruning removes), value for value those of the library's
    one-at-a-time loop (_cost_complexity_prune in sklearn/tree/_tree.pyx): node risk
    w * impurity / w_root, the smallest effective alpha first with ties to the lowest node
    id, and each pruning's r_diff added to every ancestor's branch risk.

    A round sorts the current alphas (ties: lower node id first, as the library's scan) and
    takes the longest prefix the one-at-a-time loop would also take: it stops before a node
    whose alpha an earlier pruning of the round changes (an ancestor of it), skips nodes an
    earlier pruning removes, and stops where an ancestor's alpha lies within `_SLACK` of
    the round's (pruning a weakest link only raises its ancestors' alphas). Ancestors'
    branch risks then receive each pruning's r_diff in pruning order, as in the library."""
    n = t.node_count
    r_node, r_branch, n_leaves = _initial_risks(t, anc)
    # One extra slot at index n answers the -1 padding of `anc`.
    r_node = np.append(r_node, 0.0)
    r_branch = np.append(r_branch, 0.0)
    n_leaves = np.append(n_leaves, 2)
    score = np.full(n + 1, np.inf)
    internal = np.flatnonzero(t.children_left != _LEAF)
    score[internal] = (r_node[internal] - r_branch[internal]) / (n_leaves[internal] - 1)
    low = _lowered(score, r_node, r_branch)  # each alpha less its slack, kept up to date
    far = np.iinfo(np.intp).max
    pos = np.full(n + 1, far, dtype=np.intp)
    start, stop = _preorder_spans(t, n_leaves[:n])
    cand = internal[np.argsort(start[internal], kind="stable")]  # candidates in preorder
    alphas, pruned, drops = [], [], []
    window = 1024
    while cand.size and cand[0] == 0:  # the root, first in preorder, is still a candidate
        sc = score[cand]
        if window < cand.size:
            edge = np.partition(sc, window - 1)[window - 1]
            win = cand[sc <= edge]
        else:
            win = cand
        win_score = score[win]
        order = np.lexsort((win, win_score))
        nodes, s = win[order], win_score[order]
        m = nodes.size
        pos[nodes] = np.arange(m)
        up = anc[nodes]
        up_pos = pos[up]
        rank = np.arange(m)[:, None]
        cut = min(m, int(np.where(up_pos > rank, up_pos, far).min()))
        keep = np.flatnonzero(~(up_pos[:cut] < rank[:cut]).any(axis=1))
        pos[nodes] = far
        up = up[keep]
        lowest = low[up].min(axis=1)
        late = np.flatnonzero(s[keep][1:] >= np.minimum.accumulate(lowest)[:-1])
        if late.size:
            keep, up = keep[: late[0] + 1], up[: late[0] + 1]
        P = nodes[keep]
        real = up >= 0
        reps = real.sum(axis=1)
        flat = up[real]  # pruning by pruning, in pruning order
        drop = n_leaves[P] - 1
        np.add.at(r_branch, flat, np.repeat(r_node[P] - r_branch[P], reps))
        np.subtract.at(n_leaves, flat, np.repeat(drop, reps))
        r_branch[P] = r_node[P]
        n_leaves[P] = 0
        changed = flat  # repeats write the same value
        score[changed] = (r_node[changed] - r_branch[changed]) / (n_leaves[changed] - 1)
        score[P] = np.inf
        low[changed] = _lowered(score[changed], r_node[changed], r_branch[changed])
        low[P] = np.inf
        alphas.append(s[keep])
        pruned.append(P)
        drops.append(drop)
        first = start[cand]
        cover = np.zeros(cand.size + 1, dtype=np.intp)
        np.add.at(cover, np.searchsorted(first, start[P]), 1)
        np.add.at(cover, np.searchsorted(first, stop[P]), -1)
        cand = cand[np.cumsum(cover[:-1]) == 0]
        window = max(64, 2 * cut)
    if not alphas:
        return np.empty(0), np.empty(0, dtype=np.intp), np.empty(0, dtype=np.intp)
    return np.concatenate(alphas), np.concatenate(pruned), np.concatenate(drops)


def _lowered(score, r_node, r_branch):
    """Alphas less their `_SLACK` margin, element by element."""
    return score - _SLACK * (np.abs(r_node) + np.abs(r_branch))


def pruning_alphas(tree):
    """Effective alphas of the weakest-link sequence, as ``cost_complexity_pruning_path`` gives."""
    _check_unpruned(tree)
    return np.concatenate([[0.0], _replay(tree)[0]])


def _steps_for(seq, alphas):
    """Number of weakest-link steps a refit with each ``ccp_alpha`` performs."""
    # The library prunes while effective alpha <= ccp_alpha and stops at the first
    # step above it; a running maximum makes that "first exceedance" searchable.
    # ccp_alpha == 0 skips pruning altogether.
    steps = np.searchsorted(np.maximum.accumulate(seq), alphas, side="right")
    return np.where(alphas == 0.0, 0, steps)


def _node_outputs(tree):
    """What each node predicts: its mean for a regression tree; for a classification tree
    its class probabilities as stored, which `predict_proba` returns for a leaf unchanged
    (scikit-learn >= 1.6 stores class fractions; dividing them by their sum again moves
    the last bit where class weights make that sum round off 1)."""
    t = tree.tree_
    if not hasattr(tree, "classes_"):
        return t.value[:, 0, 0]
    return t.value[:, 0, :]


def _replay(tree):
    """(effective alphas, pruned node ids, leaves each pruning removes, ancestor matrix) of
    a fitted tree. It is kept on the estimator while its tree is the same, so several
    evaluation sets share one replay, and it goes when the tree goes."""
    t = tree.tree_
    kept = getattr(tree, "_foldwise_replay", None)
    if kept is None or kept[0] is not t:
        anc = _ancestors(_parents(t), int(t.max_depth))
        kept = (t, (*_weakest_link_rounds(t, anc), anc))
        tree._foldwise_replay = kept
    return kept[1]


def _leaf_owners(t, anc, pruned, steps):
    """For every leaf and each number of prunings in `steps`, the node it falls into in the
    pruned tree: its topmost ancestor pruned by then (an ancestor is pruned after every
    pruned node below it), or the leaf itself."""
    leaves = np.flatnonzero(t.children_left == _LEAF)
    step_of = np.full(t.node_count + 1, -1, dtype=np.intp)  # index -1: the padding
    step_of[pruned] = np.arange(pruned.size)
    # Column i holds the latest pruning step among those done within steps[i] prunings;
    # one ancestor level at a time, so no (leaf, pruned ancestor) pair list is built.
    latest = np.full((leaves.size, steps.size + 1), -1, dtype=np.intp)
    for level in range(anc.shape[1]):
        when = step_of[anc[leaves, level]]
        got = np.flatnonzero(when >= 0)  # leaf positions with a pruned ancestor here
        when = when[got]
        first = np.searchsorted(steps, when, side="right")
        latest[got, first] = np.maximum(latest[got, first], when)
    latest = np.maximum.accumulate(latest[:, :-1], axis=1)
    topmost = np.append(pruned, 0)[latest]  # index -1: no pruning yet, masked below
    owners = np.where(latest >= 0, topmost, leaves[:, None])
    return leaves, owners


def pruned_tree_predictions(tree, X, alphas):
    """Predictions (values, or class probabilities of a classification tree) and leaf counts
    of refits with each ``ccp_alpha``, from one unpruned tree."""
    alphas, steps, drops, column, leaves, owners = _owners_for(tree, alphas)
    t = tree.tree_
    slot = np.empty(t.node_count, dtype=np.intp)
    slot[leaves] = np.arange(leaves.size)
    row_leaf = slot[tree.apply(X)]  # the estimator's own routing (dtype, NaN handling)
    value = _node_outputs(tree)
    preds = np.stack([value[owners[row_leaf, c]] for c in column.tolist()]) \
        if alphas.size else np.empty((0, row_leaf.size, *value.shape[1:]))
    removed = np.concatenate([[0], np.cumsum(drops)])
    return preds.astype(np.float64, copy=False), leaves.size - removed[steps]


def pruned_tree_leaves(tree, alphas) -> list[np.ndarray]:
    """For each ``ccp_alpha``, the node ids (of the unpruned ``tree``) that are the leaves
    of the tree a refit with it grows: what `pruned_tree` needs, without the replay."""
    _, _, _, column, _, owners = _owners_for(tree, alphas)
    kept = [np.unique(owners[:, c]).astype(np.int32) for c in range(owners.shape[1])]
    return [kept[c] for c in column.tolist()]


def _owners_for(tree, alphas):
    """(alphas as an array, each alpha's pruning steps, leaves each pruning removes, each
    alpha's column in `owners`, the unpruned leaves, and `_leaf_owners` for the distinct
    step counts) of an unpruned tree, after checking the tree and the alphas."""
    _check_unpruned(tree)
    alphas = np.asarray(alphas, dtype=np.float64).reshape(-1)
    if np.any(~(alphas >= 0.0)):
        raise ValueError("ccp_alpha values must be non-negative")
    seq, pruned, drops, anc = _replay(tree)
    steps = _steps_for(seq, alphas)
    distinct, column = np.unique(steps, return_inverse=True)
    leaves, owners = _leaf_owners(tree.tree_, anc, pruned, distinct)
    return alphas, steps, drops, column, leaves, owners


def forget_replay(tree) -> None:
    """Let go of the replay kept on ``tree`` (its ancestor matrix is the largest part)."""
    tree.__dict__.pop("_foldwise_replay", None)


def pruned_tree(tree, alpha: float, leaves: np.ndarray | None = None):
    """The estimator a refit with ``ccp_alpha=alpha`` gives, built from the unpruned
    ``tree``: the same growth (same seed, same rows) with the replayed sequence's subtrees
    made leaves, copied node by node in the library's own order
    (``_build_pruned_tree_py``), so its nodes, values, importances and predictions are
    those of the refit. ``leaves``: the pruned tree's leaves if known (`pruned_tree_leaves`).
    None where this scikit-learn has no such builder."""
    _check_unpruned(tree)
    if not float(alpha) >= 0.0:
        raise ValueError("ccp_alpha must be non-negative")
    try:
        from sklearn.tree._tree import Tree, _build_pruned_tree_py
    except ImportError:  # a private builder: without it the caller refits
        return None
    out = copy.copy(tree)
    forget_replay(out)
    out.ccp_alpha = alpha  # as given, as a refit keeps it
    if float(alpha) == 0.0:  # the library does not prune then
        return out
    t = tree.tree_
    if leaves is None:
        (leaves,) = pruned_tree_leaves(tree, [float(alpha)])
    kept_leaves = np.zeros(t.node_count, dtype=np.uint8)
    kept_leaves[leaves] = 1
    n_classes = np.atleast_1d(tree.n_classes_) if hasattr(tree, "classes_") else \
        np.array([1] * tree.n_outputs_, dtype=np.intp)
    out.tree_ = Tree(tree.n_features_in_, n_classes, tree.n_outputs_)
    _build_pruned_tree_py(out.tree_, t, kept_leaves)
    return out


# --------------------------------------------------------------------------
# Random forests: prefix means over the fitted trees
# --------------------------------------------------------------------------


def forest_prefix_in_batches(forest, X, y, X_evals, sizes, *, batch=8):
    """Each size's predictions for every evaluation set and its impurity importances, as
    forests with the first ``sizes[i]`` trees give them, growing ``forest`` (unfitted;
    its ``n_estimators`` the largest size) ``batch`` trees at a time.

    A warm-started forest draws the seeds a one-shot fit would, so the trees are the same;
    each batch is read (predictions added in tree order, importances kept per tree) and
    then let go, so at most ``batch`` trees are held at once. Returns (predictions: one
    array of shape (len(sizes), n_rows[, n_classes]) per evaluation set, importances:
    array of shape (len(sizes), n_features))."""
    sizes = np.asarray(sizes).reshape(-1)
    n_trees = int(forest.n_estimators)
    if sizes.size == 0 or sizes.min() < 1 or sizes.max() > n_trees:
        raise ValueError(f"sizes must lie in [1, {n_trees}]")
    # The trees read float32, as the forest's own fit and predict cast them.
    X = check_array(X, dtype=np.float32, ensure_all_finite=False)
    X_evals = [check_array(Xe, dtype=np.float32, ensure_all_finite=False) for Xe in X_evals]
    wanted = {}
    for i, k in enumerate(sizes.tolist()):
        wanted.setdefault(int(k), []).append(i)
    outs, running, per_tree = None, None, []
    forest.set_params(warm_start=True)
    grown = 0
    while grown < int(sizes.max()):
        forest.set_params(n_estimators=min(grown + batch, n_trees))
        with warnings.catch_warnings():
            # A one-shot fit warns once: later batches' fit-level warnings are repeats.
            # The warm start's own caution on class weights does not apply to the same rows.
            warnings.filterwarnings("ignore", message=".*not recommended for warm_start")
            if grown:
                warnings.simplefilter("ignore")
            forest.fit(X, y)
        classes = getattr(forest, "classes_", None)
        if outs is None:
            shapes = [(Xe.shape[0],) if classes is None else (Xe.shape[0], len(classes))
                      for Xe in X_evals]
            outs = [np.empty((sizes.size, *shape), dtype=np.float64) for shape in shapes]
            running = [np.zeros(shape, dtype=np.float64) for shape in shapes]
        for k in range(grown + 1, len(forest.estimators_) + 1):
            tree = forest.estimators_[k - 1]
            for Xe, total, out in zip(X_evals, running, outs):
                total += tree.predict(Xe) if classes is None else tree.predict_proba(Xe)
                if k in wanted:
                    out[wanted[k]] = total / k
            per_tree.append(tree.feature_importances_ if tree.tree_.node_count > 1 else None)
            forest.estimators_[k - 1] = None  # read: let the tree go
        grown = len(forest.estimators_)
    importances = np.empty((sizes.size, forest.n_features_in_), dtype=np.float64)
    for i, k in enumerate(sizes.tolist()):
        importances[i] = _mean_importances(per_tree[:k], forest.n_features_in_)
    return outs, importances


def _mean_importances(per_tree, n_features):
    """A forest's impurity importances from its trees', as the forest's own property
    computes them: the mean over trees of more than one node, normalised to sum 1."""
    chosen = [v for v in per_tree if v is not None]
    if not chosen:
        return np.zeros(n_features, dtype=np.float64)
    mean = np.mean(chosen, axis=0, dtype=np.float64)
    return mean / np.sum(mean)


# --------------------------------------------------------------------------
# Linear models: ridge via one Gram matrix, lasso / elastic net via one path
# --------------------------------------------------------------------------


def _centre(X, y, *, order: str = "K", scratch: bool = False):
    """Centre X and y the way linear models with ``fit_intercept=True`` do: the column means
    of X as given, subtracted from a copy of X in `order`, or from X itself when the caller
    gives it as `scratch` (its own, never read again) and it is already so laid out. The
    numbers are the same either way; a scratch X spares one copy of the design."""
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if X.ndim != 2 or y.ndim != 1 or X.shape[0] != y.shape[0]:
        raise ValueError("expected X of shape (n, p) and y of shape (n,)")
    X_offset = np.average(X, axis=0)
    y_offset = np.average(y, axis=0)
    laid_out = X.flags.f_contiguous if order == "F" else (
        X.flags.c_contiguous or X.flags.f_contiguous)
    Xc = X if scratch and laid_out and X.flags.writeable else np.array(X, order=order)
    Xc -= X_offset
    return Xc, y - y_offset, X_offset, y_offset


def _penalties(alphas):
    """Penalty grid as a 1-d float64 array."""
    alphas = np.asarray(alphas, dtype=np.float64).reshape(-1)
    if alphas.size == 0 or np.any(~(alphas >= 0.0)):
        raise ValueError("alphas must be a non-empty array of non-negative values")
    return alphas


class RidgePath(NamedTuple):
    """Every alpha's Ridge(solver="cholesky") fit from one Gram matrix: coefficients (one row
    per alpha), intercepts, the solver each fit ended with ("cholesky", or "svd" where its
    matrix was singular) and the warnings each alpha's own solve raised."""

    coefs: np.ndarray
    intercepts: np.ndarray
    solvers: list[str]
    warned: list[list[warnings.WarningMessage]]


def ridge_path_coefs(X_train, y_train, alphas, *, scratch: bool = False) -> RidgePath:
    """Ridge for every alpha, step for step as `Ridge(alpha, solver="cholesky")` fits it:
    from one Gram matrix XᵀX of the centred design, a p × p Cholesky solve per alpha; an
    alpha whose matrix the solve finds singular takes the SVD route, as that fit does. With
    more columns than rows the fit solves the dual problem, so each alpha is that fit
    itself. Each alpha's warnings are its own (a fit of that alpha alone raises them), and
    none escapes. With `scratch`, X_train is centred in place (`_centre`)."""
    alphas = _penalties(alphas)
    n, p = np.shape(X_train)
    if p > n:
        fits, warned = [], []
        for a in alphas:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                fits.append(Ridge(alpha=a, solver="cholesky").fit(X_train, y_train))
            warned.append(caught)
        return RidgePath(np.array([f.coef_ for f in fits]),
                         np.array([f.intercept_ for f in fits]), [f.solver_ for f in fits],
                         warned)
    Xc, yc, X_offset, y_offset = _centre(X_train, y_train, scratch=scratch)
    gram, Xy = Xc.T @ Xc, Xc.T @ yc[:, None]
    coefs = np.empty((alphas.size, p), dtype=np.float64)
    solvers, warned, svd = [], [], None
    for i, a in enumerate(alphas):
        lhs = gram.copy()
        lhs.flat[:: p + 1] += a
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                coefs[i] = linalg.solve(lhs, Xy, assume_a="pos", overwrite_a=True).T[0]
                solvers.append("cholesky")
            except linalg.LinAlgError:
                svd = svd or _svd_parts(Xc, yc)
                coefs[i] = _svd_coef(*svd, a)
                solvers.append("svd")
        warned.append(caught)
    intercepts = np.array([y_offset - X_offset @ c for c in coefs])
    return RidgePath(coefs, intercepts, solvers, warned)


def _svd_parts(Xc, yc):
    """What Ridge(solver="svd") computes once from the centred design (singular values
    at or below 1e-15 dropped, as it drops them): the route a Cholesky fit takes when its
    matrix is singular."""
    U, s, Vt = np.linalg.svd(Xc, full_matrices=False)
    keep = s > 1e-15
    return s, keep, s[keep][:, None], U.T @ yc[:, None], Vt


def _svd_coef(s, keep, s_nnz, UTy, Vt, alpha) -> np.ndarray:
    """One alpha's coefficients from `_svd_parts`, by Ridge(solver="svd")'s steps."""
    d = np.zeros((s.size, 1), dtype=np.float64)
    d[keep] = s_nnz / (s_nnz**2 + np.array([alpha]))
    return (Vt.T @ (d * UTy))[:, 0]


_RIDGE_DATA_FREE = ("n_iter_",)
"""What a fitted Ridge(solver="cholesky") holds besides its coefficients, intercept, width
and solver: values that do not depend on the data (taken from a tiny fit, so each
version's own)."""


@functools.cache
def _ridge_fitted() -> tuple[tuple[str, ...], dict]:
    """The names a Ridge(solver="cholesky") fit adds, in the order it adds them, and the
    data-free values among them, from a fit on three rows."""
    toy = Ridge(solver="cholesky").fit(np.array([[0.0], [1.0], [2.0]]),
                                       np.array([0.0, 1.0, 3.0]))
    added = tuple(k for k in vars(toy) if k not in Ridge().get_params())
    return added, {k: getattr(toy, k) for k in added if k in _RIDGE_DATA_FREE}


def ridge_model(alpha, coef: np.ndarray, intercept, solver: str = "cholesky") -> Ridge:
    """The Ridge(alpha, solver="cholesky") that a fit on the path's rows gives, from the
    path's coefficients, intercept and solver (`ridge_path_coefs` does that fit's arithmetic
    step for step, so they are its numbers: tests/test_paths.py compares the pickles).
    Refuses (ValueError) when this scikit-learn's Ridge holds something else, so that the
    cell is refitted."""
    added, data_free = _ridge_fitted()
    values = {"n_features_in_": coef.shape[0], "coef_": np.array(coef, dtype=np.float64),
              "intercept_": np.float64(intercept), "solver_": solver, **data_free}
    unknown = set(added) - set(values)
    if unknown:
        raise ValueError(f"Ridge holds {sorted(unknown)} after a fit; refit instead")
    model = Ridge(alpha=alpha, solver="cholesky")
    for key in added:
        setattr(model, key, values[key])
    return model


def elastic_net_path_coefs(
    X_train, y_train, alphas, *, l1_ratio=1.0, tol=1e-4, max_iter=1000, scratch: bool = False
):
    """Elastic-net coefficients and intercepts for every alpha from one descending path;
    with `scratch`, X_train is centred in place if it is in Fortran order (`_centre`). The
    path reads the centred copy without copying it again (it is ours and left unchanged)."""
    alphas = _penalties(alphas)
    Xc, yc, X_offset, y_offset = _centre(X_train, y_train, order="F", scratch=scratch)
    # The path runs from the largest alpha down with warm starts; solve each
    # distinct alpha once and map back to the caller's order.
    uniq, inverse = np.unique(alphas, return_inverse=True)
    _, path_coefs, _ = enet_path(
        Xc,
        yc,
        l1_ratio=l1_ratio,
        alphas=uniq[::-1],
        precompute="auto",
        copy_X=False,
        tol=tol,
        max_iter=max_iter,
    )
    coefs = path_coefs.T[::-1][inverse]
    intercepts = np.array([y_offset - X_offset @ c for c in coefs])
    return coefs, intercepts
