"""Regenerate Grovewise's bundled sample: invented patients, a random forest and an XGBoost model.

The scenario is invented from start to finish: the Fernhollow Surgical Network, a fictional
group of clinics, wants to review a model of post-operative complication risk. No row comes
from a real person; the rule that makes the target is written below and is not a medical
finding.

Run from the repository root (the default seed reproduces the bundled files)::

    PYTHONPATH=src python3 sample_models/make_sample.py            # seed 20240611
    PYTHONPATH=src python3 sample_models/make_sample.py --seed 7 --out /tmp/other

Writes into ``src/grovewise/sample/`` (package data, found by the installed package through
:func:`grovewise.sample_data.sample_paths`) unless ``--out`` names another folder:

- ``clinic_patients.csv``  all rows: ``record_id``, the features, the target ``complication``
- ``clinic_holdout.csv``   the rows held out of training (a subset of the file above)
- ``clinic_forest.skops``  scikit-learn RandomForestClassifier, saved with skops
- ``clinic_xgb.json``      XGBoost XGBClassifier, saved with its own ``save_model``
- ``sample_info.json``     seed, row counts, features and units, held-out AUC, library versions
"""

from __future__ import annotations

import argparse
import json
import platform
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import sklearn
import skops
import skops.io
import xgboost
from scipy.special import expit
from sklearn.ensemble import RandomForestClassifier
from sklearn.metrics import accuracy_score, roc_auc_score
from sklearn.model_selection import train_test_split

DEFAULT_SEED = 20240611
DEFAULT_ROWS = 3000
HOLDOUT_SHARE = 0.2
TARGET = "complication"
ID_COLUMN = "record_id"
REPO = Path(__file__).resolve().parent.parent
PACKAGE_SAMPLE = REPO / "src" / "grovewise" / "sample"

# name -> (unit, what it is); the order is the models' feature order.
FEATURES: dict[str, tuple[str, str]] = {
    "age_years": ("years", "age at surgery"),
    "height_cm": ("cm", "body height (plays no part in the rule that makes the target)"),
    "bmi": ("kg/m^2", "body-mass index"),
    "asa_class": ("1-4", "ASA physical status class"),
    "emergency_case": ("0/1", "1 if the operation was unplanned"),
    "surgery_minutes": ("min", "incision to closure"),
    "blood_loss_ml": ("mL", "estimated intra-operative blood loss"),
    "systolic_bp_mmhg": ("mmHg", "pre-operative systolic blood pressure"),
    "creatinine_mg_dl": ("mg/dL", "pre-operative serum creatinine"),
    "hemoglobin_g_dl": ("g/dL", "pre-operative hemoglobin"),
    "albumin_g_dl": ("g/dL", "pre-operative serum albumin"),
    "glucose_mg_dl": ("mg/dL", "pre-operative blood glucose"),
    "wbc_k_per_ul": ("10^3/uL", "white blood cell count"),
    "smoker": ("0/1", "1 if a current smoker"),
    "diabetes": ("0/1", "1 if diabetes is recorded"),
    "prior_admissions_12m": ("count", "hospital admissions in the previous 12 months"),
}

# column -> share of rows left empty (missing at random, after the target is drawn).
MISSING_SHARE = {"albumin_g_dl": 0.07, "glucose_mg_dl": 0.03, "creatinine_mg_dl": 0.025,
                 "bmi": 0.015}


def _clipped_normal(rng: np.random.Generator, mean, sd, low, high, n: int) -> np.ndarray:
    return np.clip(rng.normal(mean, sd, n), low, high)


def make_patients(n: int, rng: np.random.Generator) -> pd.DataFrame:
    """Invented, internally consistent patient records (no target, no gaps yet)."""
    age = np.round(_clipped_normal(rng, 61, 14, 18, 95, n))
    height = np.round(_clipped_normal(rng, 170, 9.5, 145, 200, n))
    bmi = np.round(np.clip(rng.lognormal(np.log(27.5), 0.18, n), 16, 55), 1)
    diabetes = (rng.random(n) < expit(-2.6 + 0.09 * (bmi - 27) + 0.03 * (age - 60))).astype(int)
    asa_latent = 0.035 * (age - 60) + 0.06 * (bmi - 28) + 0.8 * diabetes + rng.normal(0, 0.8, n)
    asa = np.clip(np.digitize(asa_latent, [-0.9, 0.4, 1.6]) + 1, 1, 4)
    emergency = (rng.random(n) < 0.14).astype(int)
    minutes = np.round(np.clip(rng.lognormal(np.log(115), 0.45, n) * (1 + 0.15 * emergency), 20, 480))
    blood_loss = np.round(np.clip(minutes * rng.lognormal(np.log(1.6), 0.6, n), 10, 3000), -1)
    sbp = np.round(_clipped_normal(rng, 118 + 0.3 * age, 16, 85, 210, n))
    creatinine = np.round(np.clip(rng.lognormal(np.log(0.85), 0.25, n)
                                  * (1 + 0.006 * (age - 40).clip(0) + 0.25 * diabetes), 0.4, 6.0), 2)
    hemoglobin = np.round(_clipped_normal(rng, 13.8 - 0.015 * (age - 60) - 0.6 * emergency,
                                          1.7, 6.5, 18.5, n), 1)
    albumin = np.round(_clipped_normal(rng, 4.0 - 0.006 * (age - 60) - 0.25 * emergency,
                                       0.45, 1.8, 5.3, n), 1)
    glucose = np.round(np.clip(rng.normal(98, 15, n) + diabetes * rng.normal(60, 35, n), 55, 420))
    wbc = np.round(_clipped_normal(rng, 7.2 + 2.0 * emergency, 2.0, 2.0, 25.0, n), 1)
    smoker = (rng.random(n) < 0.19).astype(int)
    prior = rng.poisson(0.25 + 0.25 * (asa - 1))
    columns = [age, height, bmi, asa, emergency, minutes, blood_loss, sbp, creatinine,
               hemoglobin, albumin, glucose, wbc, smoker, diabetes, prior]
    return pd.DataFrame(dict(zip(FEATURES, columns)))


def complication_logit(df: pd.DataFrame) -> np.ndarray:
    """The invented risk rule: an oblique step, hinges, a U-shape and two interactions.

    The largest term is a steep step along a weighted sum of age and operating time, so part
    of the boundary is a slanted line in the (age, minutes) plane that an oblique split can
    find and an axis-aligned one can only approximate with a staircase.
    """
    load = (df["age_years"] - 60) / 12 + (df["surgery_minutes"] - 140) / 50
    logit = (-2.9
             + 3.0 * expit(4.0 * (load - 0.8))
             + 0.7 * np.maximum(0.0, 11.5 - df["hemoglobin_g_dl"])
             + 1.1 * np.maximum(0.0, 3.5 - df["albumin_g_dl"])
             + 0.9 * np.maximum(0.0, df["creatinine_mg_dl"] - 1.3)
             + 0.08 * np.maximum(0.0, df["bmi"] - 35) + 0.15 * np.maximum(0.0, 19 - df["bmi"])
             + 0.3 * (df["asa_class"] - 2)
             + 0.5 * df["emergency_case"] * (df["asa_class"] - 1)
             + 1.0 * df["diabetes"] * (df["glucose_mg_dl"] > 180)
             + 0.35 * df["smoker"]
             + 0.0008 * (df["blood_loss_ml"] - 200).clip(0))
    return logit.to_numpy(dtype=float)


def make_table(n: int, seed: int) -> pd.DataFrame:
    """record_id, the features (with gaps) and the 0/1 target, all from one seed."""
    rng = np.random.default_rng(seed)
    df = make_patients(n, rng)
    y = (rng.random(n) < expit(complication_logit(df))).astype(int)
    for col, share in MISSING_SHARE.items():
        df.loc[rng.random(n) < share, col] = np.nan
    df.insert(0, ID_COLUMN, [f"FH-{i:05d}" for i in range(1, n + 1)])
    df[TARGET] = y
    return df


def fit_models(train: pd.DataFrame, seed: int) -> tuple[RandomForestClassifier, xgboost.XGBClassifier]:
    """The two models under review, both fit on a DataFrame so they keep the feature names."""
    X, y = train[list(FEATURES)], train[TARGET]
    forest = RandomForestClassifier(n_estimators=200, max_depth=6, min_samples_leaf=5,
                                    random_state=seed, n_jobs=1).fit(X, y)
    boost = xgboost.XGBClassifier(n_estimators=150, max_depth=3, learning_rate=0.1,
                                  subsample=0.8, colsample_bytree=0.8, tree_method="hist",
                                  random_state=seed, n_jobs=1).fit(X, y)
    return forest, boost


def scores(model, holdout: pd.DataFrame) -> dict[str, float]:
    X, y = holdout[list(FEATURES)], holdout[TARGET]
    p = model.predict_proba(X)[:, 1]
    return {"auc": round(float(roc_auc_score(y, p)), 4),
            "accuracy": round(float(accuracy_score(y, model.predict(X))), 4)}


def write_all(out: Path, seed: int, n: int) -> dict:
    """Make the table, fit both models, write every file into ``out``; return the info record."""
    out.mkdir(parents=True, exist_ok=True)
    df = make_table(n, seed)
    train, holdout = train_test_split(df, test_size=HOLDOUT_SHARE, random_state=seed,
                                      stratify=df[TARGET])
    forest, boost = fit_models(train, seed)
    df.to_csv(out / "clinic_patients.csv", index=False)
    holdout.sort_index().to_csv(out / "clinic_holdout.csv", index=False)
    skops.io.dump(forest, out / "clinic_forest.skops", compression=zipfile.ZIP_DEFLATED,
                  compresslevel=9)
    boost.save_model(out / "clinic_xgb.json")
    info = {
        "scenario": "invented: Fernhollow Surgical Network (fictional), post-operative complication",
        "seed": seed, "rows": n, "training_rows": len(train), "holdout_rows": len(holdout),
        "target": TARGET, "id_column": ID_COLUMN, "complication_rate": round(float(df[TARGET].mean()), 4),
        "features": {k: {"unit": u, "meaning": m} for k, (u, m) in FEATURES.items()},
        "missing_share": {c: round(float(df[c].isna().mean()), 4) for c in MISSING_SHARE},
        "holdout_scores": {"forest": scores(forest, holdout), "xgboost": scores(boost, holdout)},
        "versions": {"python": platform.python_version(), "numpy": np.__version__,
                     "pandas": pd.__version__, "scikit-learn": sklearn.__version__,
                     "xgboost": xgboost.__version__, "skops": skops.__version__},
    }
    (out / "sample_info.json").write_text(json.dumps(info, indent=2) + "\n", encoding="utf-8")
    return info


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED,
                        help=f"seed of every random step (default {DEFAULT_SEED})")
    parser.add_argument("--rows", type=int, default=DEFAULT_ROWS,
                        help=f"number of invented patients (default {DEFAULT_ROWS})")
    parser.add_argument("--out", type=Path, default=PACKAGE_SAMPLE,
                        help="folder to write into (default: the package's sample folder)")
    args = parser.parse_args(argv)
    info = write_all(args.out, args.seed, args.rows)
    for path in sorted(args.out.iterdir()):
        print(f"{path.stat().st_size / 1024:9.1f} KiB  {path}")
    print(json.dumps({"complication_rate": info["complication_rate"],
                      "holdout_scores": info["holdout_scores"]}, indent=2))


if __name__ == "__main__":
    main()
