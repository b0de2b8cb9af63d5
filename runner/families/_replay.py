"""Reading a model whose parts are let go as it is built (a forest grown a batch of trees
at a time): the reader is first run on a stand-in that records the rows it asks
predictions for; those rows are then predicted while the model is built, like any other
evaluation set; last the reader runs again on a stand-in that answers from them.

The readers are deterministic (a seeded permutation importance, the test rows), so the
second run asks for the same rows in the same order and gets the very predictions the
whole model would give. A reader that asks anything else, or whose questions would take
more than `RECORD_BYTES`, gets no answer: its reading fails, and the explain step then
refits that cell itself."""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import check_array

__all__ = ["questions", "answered", "stacked", "RECORD_BYTES", "STACK_ROWS", "Unasked"]

RECORD_BYTES = 256 * 2 ** 20
"""The most memory the recorded rows of one reading may take (float32)."""


STACK_ROWS = 2 ** 16
"""The most rows of recorded row sets put together for one call of a model's predict."""


class Unasked(LookupError):
    """The reader asked the answering stand-in for rows the recording did not hold."""


def _rows(X) -> np.ndarray:
    """Rows as the trees read them: float32, as a forest's own predict casts them."""
    return check_array(X, dtype=np.float32, ensure_all_finite=False)


class _StandIn(BaseEstimator):
    """A fitted model's outside for a reader: `feature_importances_` and the predictions
    it is asked for (`_answer`); subclasses say where the predictions come from."""

    def __init__(self):
        pass

    def fit(self, X, y=None):
        raise TypeError("a stand-in holds what a fit left; it cannot be fitted")

    def __sklearn_is_fitted__(self) -> bool:
        return True

    def _answer(self, X) -> np.ndarray:
        raise NotImplementedError


class _Values:
    """A regressor's outside: predict gives the values."""

    def predict(self, X) -> np.ndarray:
        return self._answer(X)


class _Classes:
    """A classifier's outside: `classes_`, predict_proba, and predict as the most probable
    class (as the forest's own predict takes it)."""

    def predict_proba(self, X) -> np.ndarray:
        return self._answer(X)

    def predict(self, X) -> np.ndarray:
        return self.classes_.take(np.argmax(self._answer(X), axis=1), axis=0)


class _Recorder(_StandIn):
    """Records every row set it is asked about and answers with placeholders."""

    def _answer(self, X) -> np.ndarray:
        rows = _rows(X)
        self.asked.append(rows.copy() if rows is X else rows)  # a reader may reuse its X
        if not hasattr(self, "classes_"):
            return np.zeros(len(rows))
        return np.full((len(rows), len(self.classes_)), 1.0 / len(self.classes_))


class _Answerer(_StandIn):
    """Answers the recorded row sets, in the order they were recorded."""

    def _answer(self, X) -> np.ndarray:
        rows = _rows(X)
        i = self.next
        if i >= len(self.asked) or not np.array_equal(rows, self.asked[i], equal_nan=True):
            raise Unasked("the reading asked for rows that were not recorded")
        self.next += 1
        return self.answers[i].copy()


class _RegressorRecorder(RegressorMixin, _Values, _Recorder):
    pass


class _ClassifierRecorder(ClassifierMixin, _Classes, _Recorder):
    pass


class _RegressorAnswerer(RegressorMixin, _Values, _Answerer):
    pass


class _ClassifierAnswerer(ClassifierMixin, _Classes, _Answerer):
    pass


def _stand_in(kind: type, classes, importances, **state) -> _StandIn:
    model = kind()
    if classes is not None:
        model.classes_ = np.asarray(classes)
    model.feature_importances_ = np.asarray(importances, dtype=np.float64)
    model.n_features_in_ = len(model.feature_importances_)
    for name, value in state.items():
        setattr(model, name, value)
    return model


def questions(read, prep, X_fit, y_fit, n_features: int, task: str) -> list | None:
    """The row sets (transformed, float32) that `read` asks a model for, in order, or None
    if it fails on the placeholders or its rows would take more than `RECORD_BYTES`."""
    classes = np.unique(y_fit) if task == "classification" else None
    kind = _ClassifierRecorder if classes is not None else _RegressorRecorder
    recorder = _stand_in(kind, classes, np.zeros(n_features), asked=[])
    try:
        with warnings.catch_warnings():  # placeholder answers: their warnings mean nothing
            warnings.simplefilter("ignore")
            read(Pipeline([("prep", prep), ("model", recorder)]), X_fit)
    except Exception:
        return None
    if sum(rows.nbytes for rows in recorder.asked) > RECORD_BYTES:
        return None
    return recorder.asked


def answered(asked: list, answers: list, importances, classes=None) -> _StandIn:
    """A stand-in that answers `asked[i]` with `answers[i]` and holds the model's own
    importances (and classes)."""
    kind = _ClassifierAnswerer if classes is not None else _RegressorAnswerer
    return _stand_in(kind, classes, importances, asked=asked, answers=answers, next=0)


def stacked(sets: list, rows: int = STACK_ROWS):
    """(blocks, cut): consecutive row sets put together in blocks of at most `rows` rows (a
    larger set is a block of its own), and `cut`, which turns one array per block (its
    predictions) into one per set. Each entry of `sets` is replaced by its view of its
    block as the blocks are built, so the rows are held once. A tree or a forest predicts
    each row on its own, so a row's prediction is the same number in a block as in its
    set, and a few calls replace one per set."""
    groups: list[list[int]] = []
    count = 0
    for i, rows_set in enumerate(sets):
        if not groups or count + len(rows_set) > rows:
            groups.append([])
            count = 0
        groups[-1].append(i)
        count += len(rows_set)
    offsets = [np.cumsum([len(sets[i]) for i in group])[:-1] for group in groups]
    blocks = []
    for group, at in zip(groups, offsets):
        blocks.append(np.concatenate([sets[i] for i in group]) if len(group) > 1
                      else sets[group[0]])
        for i, view in zip(group, np.split(blocks[-1], at)):
            sets[i] = view

    def cut(arrays: list) -> list:
        return [piece for at, array in zip(offsets, arrays) for piece in np.split(array, at)]

    return blocks, cut
