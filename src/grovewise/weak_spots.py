"""Weak spots of a review: where its figures say less than they seem to.

Read from a review's saved results (nothing is recomputed but counts), so the report, the
window and the command line state the same list:

- a surrogate leaf with no holdout rows, or fewer than ``leaf_min_holdout_rows``;
- a leaf whose holdout fidelity's 95% Wilson interval reaches below ``leaf_fidelity_floor``;
- a train-holdout fidelity gap above ``overfit_gap`` (the surrogate fits its own rows better
  than new ones);
- review data on which the model reproduces the given target almost perfectly (at least
  ``near_perfect_target``): probably its training data, where fidelity says little about
  new data.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .analysis.intervals import wilson_interval


@dataclass
class WeakSpot:
    """One weak spot: its kind, what it is about, and the sentence that states it."""

    kind: str  # leaf_without_holdout, leaf_few_holdout, leaf_low_fidelity, overfit, training_data
    subject: str
    text: str

    def to_dict(self) -> dict:
        return asdict(self)


def weak_spots(review) -> list[WeakSpot]:
    """The weak spots of a review that has run its surrogate and cases steps."""
    st, cases, sur = review.settings, review.cases, review.surrogate
    out: list[WeakSpot] = []
    if cases is None or sur is None:
        return out
    agree = cases.surrogate == cases.ensemble
    held = cases.split > 0
    for leaf in range(len(sur.leaves)):
        here = cases.surrogate_leaf == leaf
        n_train = int(np.count_nonzero(here & ~held))
        if n_train == 0:
            continue  # a leaf no row reaches states nothing
        n_hold = int(np.count_nonzero(here & held))
        name = f"leaf {leaf}"
        if held.any() and n_hold == 0:
            out.append(WeakSpot("leaf_without_holdout", name,
                                f"Leaf {leaf} holds {n_train} training "
                                f"row{'s' if n_train != 1 else ''} and no holdout "
                                "row: its fidelity is measured on the rows it was fit on only."))
            continue
        if not held.any():
            continue
        k = int(np.count_nonzero(here & held & agree))
        low, high = wilson_interval(k, n_hold)
        if n_hold < st.leaf_min_holdout_rows:
            out.append(WeakSpot("leaf_few_holdout", name,
                                f"Leaf {leaf} has only {n_hold} holdout "
                                f"row{'s' if n_hold != 1 else ''} (fewer than "
                                f"{st.leaf_min_holdout_rows}): its holdout fidelity "
                                f"{100 * k / n_hold:.1f}% (unweighted) has a 95% interval of "
                                f"{100 * low:.1f}% to {100 * high:.1f}%."))
        elif low < st.leaf_fidelity_floor:
            out.append(WeakSpot("leaf_low_fidelity", name,
                                f"Leaf {leaf}: holdout fidelity {100 * k / n_hold:.1f}% "
                                f"(unweighted) on {n_hold} rows, 95% interval {100 * low:.1f}% "
                                f"to {100 * high:.1f}%, reaching below the floor of "
                                f"{100 * st.leaf_fidelity_floor:.0f}%."))
    fid = sur.fidelity["surrogate"]
    if fid.get("holdout") is not None and fid["train"] - fid["holdout"] > st.overfit_gap:
        out.append(WeakSpot("overfit", "surrogate",
                            f"The surrogate agrees with the ensemble on {100 * fid['train']:.1f}% "
                            f"of its training rows but {100 * fid['holdout']:.1f}% of the "
                            f"holdout (unweighted), a gap above {100 * st.overfit_gap:.0f} "
                            "points: it fits its own rows better than new ones."))
    y = getattr(review.data, "y", None)
    if y is not None and len(y):
        n = review.data.X.shape[0]
        predicted = review.forest.classes_[cases.ensemble[:n]]
        accuracy = float(np.mean(predicted.astype(str) == np.asarray(y).astype(str)))
        if accuracy >= st.near_perfect_target:
            out.append(WeakSpot("training_data", "review data",
                                f"The model reproduces the given target on {100 * accuracy:.1f}% "
                                "of the review data: this is probably its training data, and "
                                "fidelity measured there says little about new data."))
    return out
