"""What a notebook session does: fit, tune, export, verify. Run by run.sh with the output folder.

The data is the invented cooling-fan scenario of ``nodecast demo``: four readings of a made-up power
stage and its heatsink temperature.
"""

import json
import sys
from pathlib import Path

import pandas as pd
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from nodecast.compiler import save
from nodecast.compiler.verify import check
from nodecast.trainer import RandomNodeRegressor, export, to_bundle

out = Path(sys.argv[1])
readings = pd.read_csv(out / "readings.csv")
X, y = readings.drop(columns="heatsink_temp"), readings["heatsink_temp"]

# Fit and tune as with any scikit-learn estimator.
pipeline = make_pipeline(StandardScaler(), RandomNodeRegressor(random_state=0))
search = GridSearchCV(pipeline, {"randomnoderegressor__n_nodes": [100, 200],
                                 "randomnoderegressor__n_neighbors": [20, 40]}, cv=3)
search.fit(X, y)
best = search.best_estimator_
print(f"best settings {search.best_params_}", file=sys.stderr)

# The exact fitted object becomes a bundle: the scaler folds into the network's input stage, the
# feature names come from the DataFrame, the units and the declared domain are ours to give.
bundle = to_bundle(
    best, target_names=["heatsink_temp"],
    feature_units={"ambient_temp": "degC", "fan_speed": "rpm", "load_current": "A",
                   "supply_voltage": "V"}, target_units=["degC"],
    domain={"ambient_temp": (10, 45), "fan_speed": (800, 4000), "load_current": (0, 30),
            "supply_voltage": (22, 26)})
save(bundle, out / "fan.ncast", overwrite=True)

artifacts = {
    "python": (out / "fan_predictor.py", {"out_of_domain": "reject"}),
    "onnx": (out / "fan.onnx", {"precision": "float32"}),
    "c": (out / "firmware", {"precision": "float32", "prefix": "fan", "out_of_domain": "clamp"}),
}
held_out = pd.read_csv(out / "held_out.csv")[list(bundle.network.feature_names)].to_numpy()
summary = {"bundle_id": bundle.bundle_id, "pipeline": bundle.metadata["pipeline"]}
for target, (path, options) in artifacts.items():
    export(bundle, target, path, overwrite=True, **options)
    report = check(bundle, path, data=held_out, count=512)  # AssertionError if it disagrees
    summary[target] = {"path": path.name, "max_abs_error": report["max_abs_error"],
                       "tolerance": report["tolerance"]["per_output"][0]}
    print(f"{target}: max abs error {report['max_abs_error']:.3e} degC, within "
          f"{summary[target]['tolerance']:.3e}", file=sys.stderr)
(out / "summary.json").write_text(json.dumps(summary, indent=1) + "\n")
