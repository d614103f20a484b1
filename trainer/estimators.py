"""scikit-learn estimators for networks with random hidden nodes.

A fit works in normalised coordinates (SPEC "Method"): inputs mapped to [0, 1] by the input box
(the declared domain, or the training data's range), regression targets to [0, 1] by their range.
The generator draws the hidden layer from the normalised rows; the output layer is accumulated over
row blocks (:mod:`nodecast.trainer.solvers`), so memory does not grow with the rows beyond the data.
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from nodecast.compiler.activations import get_activation
from nodecast.trainer import layer_choice, ridge_choice, solvers
from nodecast.trainer.check_fold import fold_blocks
from nodecast.trainer.generators import GENERATORS
from nodecast.trainer.generators.slope_angle import DEFAULT_ANGLES
from nodecast.trainer.generators.weight_sum import DEFAULT_SUMS
from nodecast.trainer.hidden import DesignMaker, PreactivationRange, block_bounds, design_blocks
from nodecast.trainer.layer_choice import LayerFit
from nodecast.trainer.memory import check_fits_in_memory
from nodecast.trainer.method_grid import valid_angles, valid_sums

DEFAULT_RIDGE = "auto"  # chosen per fit, see nodecast.trainer.ridge_choice and docs/training.md


def _normaliser(low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offset and scale that map [low, high] onto [0, 1]; a zero-width range keeps scale 1."""
    span = high - low
    return low.copy(), np.where(span > 0, span, 1.0)


def _is_dask(value) -> bool:
    return type(value).__module__.startswith("dask.")


def _fit_dask(estimator, X, y, classify: bool):
    from nodecast.trainer.dask_fit import fit_dask

    return fit_dask(estimator, X, y, classify)


def _is_count(value, minimum: int = 1) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= minimum


def _is_positive(value) -> bool:
    return isinstance(value, (int, float, np.number)) and np.isfinite(value) and value > 0


class _RandomNodeBase(BaseEstimator):
    def __init__(self, n_nodes=200, method="data-driven", n_neighbors="auto", slope_scale="auto",
                 ridge=DEFAULT_RIDGE, activation="logistic", interval=1.0, domain=None,
                 random_state=None, angle_range=DEFAULT_ANGLES, weight_sum=DEFAULT_SUMS,
                 check_fraction=ridge_choice.CHECK_FRACTION):
        self.n_nodes = n_nodes
        self.method = method
        self.n_neighbors = n_neighbors
        self.slope_scale = slope_scale
        self.ridge = ridge
        self.activation = activation
        self.interval = interval
        self.domain = domain
        self.random_state = random_state
        self.angle_range = angle_range
        self.weight_sum = weight_sum
        self.check_fraction = check_fraction

    def _check_params(self) -> None:
        if self.method not in GENERATORS:
            raise ValueError(f"method must be one of {sorted(GENERATORS)}, got {self.method!r}")
        get_activation(self.activation)
        if not _is_count(self.n_nodes):
            raise ValueError(f"n_nodes must be a positive integer, got {self.n_nodes!r}")
        if self.n_neighbors not in (None, "auto") and not _is_count(self.n_neighbors):
            raise ValueError(f"n_neighbors must be a positive integer, None or 'auto', got "
                             f"{self.n_neighbors!r}")
        if not (self.ridge == "auto" or _is_positive(self.ridge)
                or (isinstance(self.ridge, (int, float, np.number)) and self.ridge == 0)):
            raise ValueError(f"ridge must be 'auto' or a finite number >= 0, got {self.ridge!r}")
        if not (self.slope_scale == "auto" or _is_positive(self.slope_scale)):
            raise ValueError(f"slope_scale must be 'auto' or a finite positive number, got "
                             f"{self.slope_scale!r}")
        if not (isinstance(self.check_fraction, (int, float, np.number))
                and 0 <= self.check_fraction < 1):
            raise ValueError(f"check_fraction must be a number from 0 to below 1, got "
                             f"{self.check_fraction!r}")
        if not _is_positive(self.interval):
            raise ValueError(f"interval must be a finite positive number, got {self.interval!r}")
        if not valid_angles(self.angle_range):
            raise ValueError(f"angle_range must be (min, max) degrees with 0 <= min <= max < 90, "
                             f"got {self.angle_range!r}")
        if not valid_sums(self.weight_sum):
            raise ValueError(f"weight_sum must be (r, s) with 0 < r <= s, got {self.weight_sum!r}")

    def _input_box(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if self.domain is None:
            return X.min(axis=0), X.max(axis=0)
        low, high = (np.asarray(side, dtype=np.float64).reshape(-1) for side in self.domain)
        if low.shape != (X.shape[1],) or high.shape != low.shape:
            raise ValueError(f"domain must be (low, high) with one value per feature each "
                             f"({X.shape[1]}), got shapes {low.shape} and {high.shape}")
        if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high)) and np.all(low <= high)):
            raise ValueError("domain bounds must be finite with low <= high for every feature")
        return low, high

    def _fit_targets(self, X: np.ndarray, Y: np.ndarray) -> None:
        """Draw the hidden layer from normalised data and solve the output layer."""
        self._check_params()
        if X.shape[0] < 2:
            raise ValueError(f"need at least 2 samples to fit, got n_samples = {X.shape[0]}")
        check_fits_in_memory(X.shape[0], X.shape[1], int(self.n_nodes), Y.shape[1],
                             float(self.check_fraction))
        rng = check_random_state(self.random_state)
        activation = get_activation(self.activation)
        self.domain_low_, self.domain_high_ = self._input_box(X)
        self.input_offset_, self.input_scale_ = _normaliser(self.domain_low_, self.domain_high_)
        self.output_offset_, self.output_scale_ = self._target_scaling(Y)
        U = (X - self.input_offset_) / self.input_scale_
        T = (Y - self.output_offset_) / self.output_scale_
        fit = self._draw_and_factor(U, T, rng, activation)
        self.diagnostics_ = {**fit.layer.diagnostics, **self._data_diagnostics(X)}
        self._solve_output(fit)

    def _solve_output(self, fit: LayerFit) -> None:
        """The hidden layer, the ridge and the output layer of ``fit`` (its factor of [1, H],
        however it was accumulated, and the held-out check's data)."""
        self.hidden_weights_, self.hidden_biases_ = fit.layer.weights, fit.layer.biases
        self.training_z_low_, self.training_z_high_ = fit.ranges.low, fit.ranges.high
        if fit.ridge_rule is not None:
            self.ridge_, self.ridge_choice_ = fit.ridge_rule
        else:
            self.ridge_, self.ridge_choice_ = float(self.ridge), {"rule": "given"}
        self.coef_, self.intercept_ = solvers.solve(fit.factor, self.ridge_)
        self.heldout_figures_ = None if fit.check is None else ridge_choice.heldout_figures(
            fit.check, self.ridge_, self.output_scale_, hasattr(self, "classes_"))

    def _layer_fit(self, layer, factor, ranges, check) -> LayerFit:
        """The layer's :class:`LayerFit`, with the automatic ridge's rule applied to its factor
        (the rule's export-error guard needs the layer, so it runs here, once per layer)."""
        rule = None
        if self.ridge == "auto":
            errors = self._float32_error(factor, layer.weights, layer.biases)
            rule = ridge_choice.choose(factor, errors, check)
        return LayerFit(layer, factor, ranges, check, rule)

    def _draw_and_factor(self, U, T, rng, activation):
        """The :class:`LayerFit` of the hidden layer; data-driven k and s given as "auto" are
        chosen by :mod:`nodecast.trainer.layer_choice`."""
        state = rng.get_state()

        def fit_layer(n_neighbors, slope_scale):
            rng.set_state(state)  # every candidate draws as a plain fit with its settings would
            layer = GENERATORS[self.method](
                U, T, int(self.n_nodes), rng, activation, n_neighbors=n_neighbors,
                slope_scale=float(slope_scale), interval=float(self.interval),
                angle_range=tuple(self.angle_range), weight_sum=tuple(self.weight_sum))
            # the rows are folded in the same order whatever the ridge, so that giving the ridge
            # "auto" chose reproduces the model bit for bit
            checked = ridge_choice.check_rows(U, rng, float(self.check_fraction))
            with solvers.single_blas_thread():  # threaded products round differently: one
                # thread, the same bundle whatever the machine (docs/reliability.md)
                return self._layer_fit(layer, *self._accumulate(layer, U, T, activation, checked))

        auto = self.method == "data-driven" and "auto" in (self.n_neighbors, self.slope_scale)
        if not auto:
            fitted = fit_layer(self.n_neighbors, 1.0 if self.slope_scale == "auto" else self.slope_scale)
            self.layer_choice_ = {"rule": "given"}
            self.slope_scale_ = None if self.method != "data-driven" else float(self.slope_scale)
            return fitted
        varying = int(np.sum(np.ptp(U, axis=0) > 0))
        fitted, _, s, self.layer_choice_ = layer_choice.choose(
            fit_layer, self.n_neighbors, self.slope_scale, self._candidate_score, varying, U.shape[0])
        self.slope_scale_ = float(s)
        return fitted

    def _candidate_score(self, fit: LayerFit) -> float:
        """A (k, s) candidate's score for :mod:`nodecast.trainer.layer_choice`: the GCV estimate
        (normalised RMSE per output) at the ridge this fit would ship with: the automatic rule's,
        or the given one."""
        if fit.ridge_rule is not None:
            return fit.ridge_rule[1]["gcv_rmse_normalised"]
        return layer_choice.gcv_rmse(fit.factor, self.ridge)

    def _float32_error(self, factor, weights, biases):
        """callable(ridge) -> certified float32 export error of the default C artifact (normalised
        units) of that solution with these hidden weights and biases, from a coarse refinement
        (certified, a little looser)."""
        from nodecast.compiler.bounds.certificate import screening_bound
        from nodecast.compiler.ir import Network

        n, t = weights.shape[1], factor.qty.shape[1]

        def error(ridge: float) -> float:
            beta, bias = solvers.solve(factor, ridge)
            net = Network(
                hidden_weights=weights, hidden_biases=biases,
                activation=self.activation, output_weights=beta, output_bias=bias,
                input_offset=self.input_offset_, input_scale=self.input_scale_,
                output_offset=np.zeros(t), output_scale=np.ones(t), domain_low=self.domain_low_,
                domain_high=self.domain_high_, feature_names=[f"x{i}" for i in range(n)],
                target_names=[f"y{i}" for i in range(t)])
            return screening_bound(net, "float32")

        return error

    def _data_diagnostics(self, X: np.ndarray) -> dict[str, int]:
        outside = np.any((X < self.domain_low_) | (X > self.domain_high_), axis=1)
        return {"constant_features": int(np.sum(self.domain_high_ == self.domain_low_)),
                "rows_outside_domain": int(outside.sum())}

    def _accumulate(self, layer, U: np.ndarray, T: np.ndarray, activation, checked=None):
        """The output layer's factor over row blocks, each node's pre-activation range, and (for
        the ``checked`` rows, a :class:`~nodecast.trainer.ridge_choice.CheckRows`) the held-out
        check of the default ridge."""
        ranges = PreactivationRange(layer.weights.shape[0])
        make = DesignMaker(layer.weights, layer.biases, activation, ranges)
        blocks = ((U[start:stop], T[start:stop])
                  for start, stop in block_bounds(U.shape[0], layer.weights.shape[0]))
        factor, check = fold_blocks(blocks, make, checked)
        return factor, ranges, check

    def _target_scaling(self, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return _normaliser(Y.min(axis=0), Y.max(axis=0))

    def _decision(self, X) -> np.ndarray:
        """Outputs in target units (classifiers: per-class scores), shape (n_samples, t)."""
        check_is_fitted(self)
        X = validate_data(self, X, reset=False, dtype=np.float64)
        U = (X - self.input_offset_) / self.input_scale_
        out = np.empty((U.shape[0], self.coef_.shape[1]))
        bounds = block_bounds(U.shape[0], self.hidden_weights_.shape[0], growing=False)
        blocks = design_blocks(U, self.hidden_weights_, self.hidden_biases_,
                               get_activation(self.activation), bounds)
        for (start, stop), design in zip(bounds, blocks, strict=True):
            out[start:stop] = design[:, 1:] @ self.coef_ + self.intercept_
        return self.output_offset_ + self.output_scale_ * out


_PARAMETERS = """
    Parameters
    ----------
    n_nodes : int, default 200
        Hidden nodes M.
    method : {"data-driven", "interval", "domain-anchored", "slope-angle", "weight-sum"}, \
default "data-driven"
        Hidden-node generator (:mod:`nodecast.trainer.generators`, docs/training.md).
    n_neighbors : int, None or "auto", default "auto"
        Neighbours k of the data-driven local fits (None: max(10, 2 (n + 1)), at most 128; at most the rows;
        "auto": chosen by generalized cross-validation, :mod:`nodecast.trainer.layer_choice`).
    slope_scale : float or "auto", default "auto"
        Factor s on the data-driven slopes (1 is the published method; "auto" as for k).
    ridge : float or "auto", default "auto"
        Penalty lambda on the output weights in normalised coordinates, objective
        ||H beta + c - T||^2 + lambda ||beta||^2 (0: minimum-norm least squares). "auto":
        generalized cross-validation on a grid checked on held-out rows (the larger ridge within
        noise preferred), raised where needed until the estimated float32 export error is at
        most 2% of the estimated error (:mod:`nodecast.trainer.ridge_choice`).
    activation : {"logistic", "tanh"}, default "logistic"
    interval : float, default 1.0
        u of the U(-u, u) weight draws of the interval and domain-anchored methods.
    angle_range : (min, max), default (0, 70)
        Slope angles in degrees of the slope-angle method, 0 <= min <= max < 90.
    weight_sum : (r, s), default (2, 10)
        Interval of each node's sum of weight magnitudes, weight-sum method, 0 < r <= s.
    domain : (low, high) or None, default None
        The declared input box, one value per feature each (None: the training data's range).
        Rows outside it are counted in ``diagnostics_``, not dropped.
    random_state : int, RandomState instance or None, default None
    check_fraction : float, default 0.2
        Share of the rows held out (at most about 20,000, each chosen by a hash of its inputs) for
        the automatic ridge's check; the figures of the check are ``heldout_figures_``, the
        validation figures of ``nodecast train``. 0: no check (the ridge by GCV alone).

    Attributes
    ----------
    hidden_weights_ : ndarray of shape (n_nodes, n_features), on normalised inputs.
    hidden_biases_ : ndarray of shape (n_nodes,)
    coef_ : ndarray of shape (n_nodes, n_outputs); intercept_ : ndarray of shape (n_outputs,)
    input_offset_, input_scale_, domain_low_, domain_high_ : ndarray of shape (n_features,)
    output_offset_, output_scale_ : ndarray of shape (n_outputs,)
    training_z_low_, training_z_high_ : ndarray of shape (n_nodes,), each node's pre-activation
        range over the training rows.
    ridge_ : float, the lambda used; ridge_choice_ : dict, how it was chosen.
    slope_scale_ : float or None, the data-driven s used; layer_choice_ : dict, how k and s were
        chosen (the k used is ``diagnostics_["neighbors"]``).
    diagnostics_ : dict of counts (degenerate neighbourhoods, constant features, rows outside the
        domain), see docs/training.md.
    heldout_figures_ : dict or None, the model with ``ridge_`` fitted to the rows outside the check
        set and scored on the check rows (RMSE and largest error per output, or accuracy; rows);
        None without a check. Its hidden layer, k, s and ridge were chosen with all rows, the check
        rows included (docs/training.md).
"""


class RandomNodeRegressor(RegressorMixin, _RandomNodeBase):
    __doc__ = "Regression network with random hidden nodes (data-driven by default).\n" + _PARAMETERS

    def fit(self, X, y):
        """Fit to X of shape (n_samples, n_features) and y of shape (n_samples,) or (n_samples, t);
        dask arrays or dataframes are fitted partition by partition (docs/scale.md)."""
        if _is_dask(X):
            return _fit_dask(self, X, y, classify=False)
        X, y = validate_data(self, X, y, multi_output=True, y_numeric=True, dtype=np.float64)
        self._y_was_1d_ = y.ndim == 1
        self._fit_targets(X, y.reshape(X.shape[0], -1).astype(np.float64))
        return self

    def predict(self, X):
        """Predictions, ndarray of shape (n_samples,) or (n_samples, n_targets)."""
        out = self._decision(X)
        return out[:, 0] if self._y_was_1d_ else out

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.multi_output = True
        return tags


class RandomNodeClassifier(ClassifierMixin, _RandomNodeBase):
    __doc__ = """Classification network with random hidden nodes, fitted to one-hot targets.

    Each class is one output, fitted by least squares to the class's indicator (1 for rows of the
    class, 0 otherwise; no target scaling). ``class_scores`` returns these per-class scores (the
    bundle's outputs): they estimate the class indicator, so they are near 1 for the class and
    near 0 elsewhere, and they sum to 1 in every row (the indicators do, and the fit is linear in
    the targets with an unpenalised bias), but they are not probabilities: single scores may fall
    below 0 or above 1. ``predict`` returns the original label (``classes_``, any sortable labels,
    strings included) of the highest score; ties go to the first class in ``classes_`` order.
    ``decision_function`` follows scikit-learn: the scores, or for two classes the score of
    ``classes_[1]`` minus that of ``classes_[0]`` (positive means ``classes_[1]``).
    """ + _PARAMETERS + """    classes_ : ndarray of shape (n_classes,), the sorted original labels.
"""

    def fit(self, X, y):
        """Fit to X of shape (n_samples, n_features) and labels y of shape (n_samples,); dask
        arrays or dataframes are fitted partition by partition (docs/scale.md)."""
        if _is_dask(X):
            return _fit_dask(self, X, y, classify=True)
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        self.classes_, codes = np.unique(y, return_inverse=True)
        if self.classes_.size < 2:
            raise ValueError(f"need samples of at least 2 classes, got 1 class ({self.classes_[0]!r})")
        onehot = np.zeros((X.shape[0], self.classes_.size))
        onehot[np.arange(X.shape[0]), codes] = 1.0
        self._fit_targets(X, onehot)
        return self

    def _target_scaling(self, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return np.zeros(Y.shape[1]), np.ones(Y.shape[1])

    def class_scores(self, X):
        """Per-class scores, ndarray of shape (n_samples, n_classes), columns in ``classes_`` order."""
        return self._decision(X)

    def decision_function(self, X):
        """ndarray of shape (n_samples, n_classes), or (n_samples,) for two classes."""
        scores = self._decision(X)
        return scores[:, 1] - scores[:, 0] if scores.shape[1] == 2 else scores

    def predict(self, X):
        """Labels, ndarray of shape (n_samples,), from ``classes_``."""
        check_is_fitted(self)
        return self.classes_[np.argmax(self._decision(X), axis=1)]
