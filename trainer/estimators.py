"""scikit-learn estimators for networks with random hidden nodes."""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from nodecast.compiler.activations import get_activation
from nodecast.trainer import solvers
from nodecast.trainer.generators import GENERATORS

_BLOCK_ROWS = 4096


def _normaliser(low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offset and scale that map [low, high] onto [0, 1]; a zero-width range keeps scale 1."""
    span = high - low
    return low.copy(), np.where(span > 0, span, 1.0)


class _RandomNodeBase(BaseEstimator):
    def __init__(self, n_nodes=200, method="data-driven", n_neighbors=None, slope_scale=1.0,
                 ridge=1e-6, activation="logistic", interval=1.0, domain=None, random_state=None):
        self.n_nodes = n_nodes
        self.method = method
        self.n_neighbors = n_neighbors
        self.slope_scale = slope_scale
        self.ridge = ridge
        self.activation = activation
        self.interval = interval
        self.domain = domain
        self.random_state = random_state

    def _check_params(self, n_features: int) -> None:
        if self.method not in GENERATORS:
            raise ValueError(f"method must be one of {sorted(GENERATORS)}, got {self.method!r}")
        get_activation(self.activation)
        if not (isinstance(self.n_nodes, (int, np.integer)) and self.n_nodes >= 1):
            raise ValueError(f"n_nodes must be a positive integer, got {self.n_nodes!r}")
        if self.n_neighbors is not None and not (
                isinstance(self.n_neighbors, (int, np.integer)) and self.n_neighbors >= 1):
            raise ValueError(f"n_neighbors must be a positive integer or None, got {self.n_neighbors!r}")
        if not np.isfinite(self.ridge) or self.ridge < 0:
            raise ValueError(f"ridge must be a finite number >= 0, got {self.ridge!r}")
        if not np.isfinite(self.slope_scale) or self.slope_scale <= 0:
            raise ValueError(f"slope_scale must be a positive number, got {self.slope_scale!r}")

    def _input_box(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if self.domain is None:
            return X.min(axis=0), X.max(axis=0)
        low, high = (np.asarray(side, dtype=np.float64).reshape(-1) for side in self.domain)
        if low.shape != (X.shape[1],) or high.shape != low.shape or np.any(low > high):
            raise ValueError("domain must be (low, high), each of one value per feature, low <= high")
        return low, high

    def _fit_targets(self, X: np.ndarray, Y: np.ndarray) -> None:
        """Draw the hidden layer from normalised data and solve the output layer."""
        self._check_params(X.shape[1])
        self.n_features_in_ = X.shape[1]
        rng = check_random_state(self.random_state)
        activation = get_activation(self.activation)
        self.domain_low_, self.domain_high_ = self._input_box(X)
        self.input_offset_, self.input_scale_ = _normaliser(self.domain_low_, self.domain_high_)
        self.output_offset_, self.output_scale_ = self._target_scaling(Y)
        U = (X - self.input_offset_) / self.input_scale_
        T = (Y - self.output_offset_) / self.output_scale_
        layer = GENERATORS[self.method](
            U, T, self.n_nodes, rng, activation, n_neighbors=self.n_neighbors,
            slope_scale=self.slope_scale, interval=self.interval)
        self.hidden_weights_, self.hidden_biases_ = layer.weights, layer.biases
        self.diagnostics_ = dict(layer.diagnostics)
        factor = solvers.accumulate(
            (self._hidden(U[i : i + _BLOCK_ROWS]), T[i : i + _BLOCK_ROWS])
            for i in range(0, U.shape[0], _BLOCK_ROWS))
        self.coef_, self.intercept_ = solvers.solve(factor, float(self.ridge))

    def _target_scaling(self, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return _normaliser(Y.min(axis=0), Y.max(axis=0))

    def _hidden(self, U: np.ndarray) -> np.ndarray:
        g = get_activation(self.activation).function
        return g(U @ self.hidden_weights_.T + self.hidden_biases_)

    def _decision(self, X) -> np.ndarray:
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        U = (X - self.input_offset_) / self.input_scale_
        return self.output_offset_ + self.output_scale_ * (self._hidden(U) @ self.coef_ + self.intercept_)


class RandomNodeRegressor(RegressorMixin, _RandomNodeBase):
    """Regression network with random hidden nodes (data-driven by default).

    Parameters
    ----------
    n_nodes : int, hidden nodes M.
    method : {"data-driven", "interval", "domain-anchored"}
    n_neighbors : int or None, neighbours k of the data-driven local fits (None: max(10, 2 (n + 1))).
    slope_scale : float, factor s on the data-driven slopes (1 is the published method).
    ridge : float, penalty lambda on the output weights (0: minimum-norm least squares).
    activation : {"logistic", "tanh"}
    interval : float, u of the U(-u, u) draws of the baseline methods.
    domain : (low, high) or None, the declared input box (None: the training data's range).
    random_state : int, RandomState instance or None.
    """

    def fit(self, X, y):
        X, y = validate_data(self, X, y, multi_output=True, y_numeric=True, dtype=np.float64)
        self._y_was_1d_ = y.ndim == 1
        self._fit_targets(X, y.reshape(X.shape[0], -1).astype(np.float64))
        return self

    def predict(self, X):
        """Predictions, ndarray of shape (n_samples,) or (n_samples, n_targets)."""
        out = self._decision(X)
        return out[:, 0] if self._y_was_1d_ else out


class RandomNodeClassifier(ClassifierMixin, _RandomNodeBase):
    """Classification network with random hidden nodes, fitted to one-hot targets.

    ``decision_function`` returns one score per class: the least-squares fit of the class's
    indicator (near 1 for the class, near 0 otherwise). Scores are not probabilities: they may fall
    outside [0, 1] and need not sum to 1. ``predict`` returns the label of the highest score.
    Parameters as for :class:`RandomNodeRegressor`.
    """

    def fit(self, X, y):
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        self.classes_, codes = np.unique(y, return_inverse=True)
        onehot = np.zeros((X.shape[0], self.classes_.size))
        onehot[np.arange(X.shape[0]), codes] = 1.0
        self._fit_targets(X, onehot)
        return self

    def _target_scaling(self, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return np.zeros(Y.shape[1]), np.ones(Y.shape[1])

    def decision_function(self, X):
        """Per-class scores, ndarray of shape (n_samples, n_classes)."""
        return self._decision(X)

    def predict(self, X):
        return self.classes_[np.argmax(self.decision_function(X), axis=1)]
