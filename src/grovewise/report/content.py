"""The review as a report: one Document composed from a Review's results, rendered to HTML
and PDF, with the manifest beside them.

A stranger must be able to judge the model from the report alone: what was reviewed (files
and hashes), that Grovewise reproduces the model exactly, what the model relies on, how
faithful the readable surrogate is next to a greedy tree of the same depth, where they
disagree, what the solver proved, the reviewer's decision, the cautions, and how to re-run it.
"""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path

import numpy as np

from . import figures_anatomy as fa
from . import figures_effects as fe
from ..cautions import CAUTIONS
from ..hashing import sha256_of
from .atomic import write_atomic
from .document import (Code, Contents, Document, Figure, Heading, KeyValues, PageBreak, Paragraph,
                       Table, Title, setting_text)
from ..effects_summary import DISAGREEMENT_ROWS
from .evidence import evidence_rows, second_model_section, stability_section
from .figures_performance import SHARE as RELIABILITY_SHARE, reliability_figure
from .figures_surrogate import surrogate_tree_figure
from .html_report import render_html
from .manifest import build_manifest, deterministic, library_versions, saved_review_entry
from .pdf_report import render_pdf

DECISION_TEXT = {"pending": "not yet decided", "approve": "approved",
                 "approve_with_conditions": "approved with conditions", "reject": "rejected"}


def pct(v) -> str:
    return "n/a" if v is None else f"{100 * float(v):.1f}%"


def _num(v, digits: int = 4) -> str:
    if v is None:
        return "n/a"
    v = float(v)
    return "n/a" if not np.isfinite(v) else f"{v:.{digits}g}"


def _flags(review) -> dict:
    return dict(review.settings.flags or {})


def review_document(review, date: _dt.datetime | None = None) -> Document:
    """Compose the report of a review that has run every step."""
    inp, intake = review.inputs, review.intake
    date = date or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0)
    rv = review.reviewer
    reviewer = ", ".join(x for x in (rv.name, rv.role) if x) or "not named"
    doc = Document(
        title="Model review",
        meta={"model": Path(inp.model).name, "data": Path(inp.data).name,
              "hashes": {Path(inp.model).name: intake.model_sha256,
                         Path(inp.data).name: intake.data_sha256,
                         **({Path(inp.holdout).name: intake.holdout_sha256}
                            if inp.holdout else {})},
              "date": date, "reviewer": reviewer,
              "decision": DECISION_TEXT.get(rv.decision, rv.decision)})
    doc.add(Title("Model review", f"{intake.summary.kind.replace('_', ' ')} · "
                                  f"{Path(inp.model).name} on {Path(inp.data).name}",
                  own_page=True), Contents(), PageBreak())
    _summary(doc, review)
    _intake(doc, review)
    _samples(doc, review)
    _anatomy(doc, review)
    _proximity(doc, review)
    _surrogate(doc, review)
    second_model_section(doc, review)
    _effects(doc, review)
    _cases(doc, review)
    _limitations(doc, review)
    _reproduce(doc, review)
    _signoff(doc, review)
    return doc


ROW_NUMBERING = ("Rows are numbered from 1 in the order of the data file (the header is not "
                 "counted), as in the window and in the messages; rows of a separate holdout "
                 "file follow the review data's.")


def fidelity_text(result, part: str, model: str = "surrogate") -> str:
    """``"93.4% (95% interval 91.2% to 95.1%)"``: an unweighted fidelity of a surrogate
    result (``mimic``'s) on its training or holdout rows, with its Wilson interval."""
    from ..analysis.intervals import wilson_interval

    v = result.fidelity[model][part]
    if v is None:
        return "n/a"
    ci = result.fidelity[model].get(f"{part}_ci")
    if ci is None:  # a result saved before the intervals were stored with it
        rows = result.train_rows if part == "train" else result.holdout_rows
        ci = wilson_interval(int(round(v * rows.size)), int(rows.size))
    return f"{pct(v)} (95% interval {pct(ci[0])} to {pct(ci[1])})" if ci else pct(v)


def _choice_words(sur) -> str:
    """The candidates table's word on the choice when an axis-aligned tree was handed it."""
    level = (sur.settings or {}).get("oblique_level")
    if level is None:
        return ""
    return (f", unless it has multi-feature splits that do not agree on significantly more rows "
            f"than the best axis-aligned one, at level {level:g}: then that one; the answer "
            f"here is {sur.winner}")


def _axis_rows(review) -> list[tuple[str, str]]:
    """The exact axis-aligned tree's summary row (none for a review saved before it, or at
    depth 3 and more, where it is not computed)."""
    sur = review.surrogate
    fid = sur.fidelity
    if "optimal_axis" not in fid:
        return []
    ax = (sur.certificate.get("optimal_axis") or {})
    proven = "proven optimal" if ax.get("optimal") else "best found, not proven"
    return [("Exact axis-aligned tree", f"same depth, {proven}; fidelity (unweighted) "
             f"{fidelity_text(sur, 'train', 'optimal_axis')} train / "
             f"{fidelity_text(sur, 'holdout', 'optimal_axis')} holdout")]


def _proof_text(proof) -> str:
    if not proof:
        return "not run"
    routes = ", ".join(f"{k} {v:.5f}" for k, v in proof.get("routes", {}).items())
    parts = proof.get("parts") or []
    solved = sum(p.get("status") == "optimal" for p in parts)
    return (f"bound on the weighted disagreement {proof['disagreement_bound']:.5f} "
            f"({proof['method']}); every route: {routes}; {len(parts)} part(s) solved, "
            f"{solved} to optimality")


def _groups(doc: Document, review) -> None:
    """Faithfulness per group of every protected feature and group column."""
    sur = review.surrogate
    found = getattr(sur, "group_fidelity", None) or []
    if not found:
        return
    part = "holdout" if sur.holdout_rows.size else "training"
    doc.add(Heading("Faithfulness per group", 2))
    doc.add(Paragraph(f"Fidelity (unweighted) on the {part} rows of each group, with its 95% "
                      "Wilson interval; a group of fewer than 30 rows is marked too small to "
                      "judge and left out of the gaps.", "note"))
    for gf in found:
        doc.add(Paragraph(gf.sentence()))
        trees = [t for t in ("surrogate", "greedy") if t in gf.trees]
        rows = [[g.label, g.rows] + [f"{pct(g.fidelity[t])} ({pct(g.interval[t][0])} to "
                                     f"{pct(g.interval[t][1])})" for t in trees]
                + ["too small" if g.too_small else ""] for g in gf.groups]
        doc.add(Table(["group", "rows"] + [f"{t} fidelity (95% interval)" for t in trees]
                      + [""], rows, caption=f"Fidelity per group of {gf.name} ({gf.grouping})",
                      formats=[None, ",d"] + [None] * (len(trees) + 1)))


def _depth_text(review) -> str:
    """``depth 2``, or ``depth 1 used of 2 allowed`` when splits that decide nothing were
    left out."""
    allowed = review.settings.depth
    used = getattr(review.surrogate.surrogate, "depth_used_", allowed)
    return f"depth {used}" if used == allowed else f"depth {used} used of {allowed} allowed"


def certificate_line(review) -> str:
    """The certificate in words: the fidelity no tree of the class can beat on the training
    rows, this tree's, the gap and the bound's method; then the status word."""
    sur = review.surrogate
    cert = sur.certificate
    statement = cert.get("statement")
    if statement:
        return f"{statement} Status: {cert.get('status')}."
    # a review saved before the proof existed: its bound covered the program's sample
    points = (cert.get("sample") or {}).get("points")
    n_train = int(sur.train_rows.size)
    if cert.get("bound") is None:
        covers = "no bound was proved (the program did not run to one)"
    else:
        covers = (f"the bound covers the program's {int(points):,}-point sample of the "
                  f"{n_train:,} training rows, not the training rows themselves"
                  if points else f"the bound covers the {n_train:,} training rows")
    return (f"{cert.get('status')}: objective {_num(cert.get('objective'), 5)}, bound "
            f"{_num(cert.get('bound'), 5)}, gap {_num(cert.get('gap'), 3)}; {covers}")


CONTRIBUTION_MEASURE = "mean |contribution|"  # its name among the importance measures


def effects_of(review):
    """The review's saved effects (an EffectsResult), or None for a review saved before the
    cases step computed them."""
    cases = review.cases
    return None if cases is None else getattr(cases, "effects", None)


def contribution_ranks(review) -> np.ndarray | None:
    """Each feature's rank by mean |contribution| in the saved effects (1 = largest, ties
    share the best rank), in the order of the model's features; None without effects."""
    from ..analysis.importance import importance_ranks

    fx = effects_of(review)
    if fx is None:
        return None
    names = review.anatomy.importance.feature_names
    return importance_ranks(np.array([fx.importance.get(n, 0.0) for n in names]))


def review_reliance(review):
    """What the model relies on most: impurity and permutation importance, and the mean
    |contribution| (Shapley values) when the review has its effects."""
    from ..analysis.importance import reliance

    ranks = contribution_ranks(review)
    return reliance(review.anatomy.importance,
                    extra=None if ranks is None else {CONTRIBUTION_MEASURE: ranks})


def reliance_text(relies, k: int = 3) -> str:
    """``"a, b, c (by the mean rank of impurity importance, permutation importance and mean
    |contribution|)"``."""
    m = list(relies.measures)
    by = m[0] if len(m) == 1 else f"{', '.join(m[:-1])} and {m[-1]}"
    return f"{', '.join(relies.top(k))} (by the mean rank of {by})"


def _summary(doc: Document, review) -> None:
    from ..weak_spots import weak_spots

    s, intake, sur = review.intake.summary, review.intake, review.surrogate
    relies = review_reliance(review)
    rows = [
        ("Model", f"{s.kind.replace('_', ' ')} ({s.library}), {s.n_trees} trees, depth "
                  f"{s.depth_min} to {s.depth_max}, classes {', '.join(map(str, s.classes))}"),
        ("Review data", f"{s.rows} rows, {s.n_features} features; surrogate fit on "
                        f"{intake.train_rows.size} rows, holdout {_holdout_text(review)}"),
        ("Exactness", intake.exactness.text()),
        ("Relies most on", reliance_text(relies)),
        ("Surrogate", f"{_depth_text(review)}, fidelity (unweighted) "
                      f"{fidelity_text(sur, 'train')} train / "
                      f"{fidelity_text(sur, 'holdout')} holdout"),
        ("Greedy tree", f"same depth, fidelity (unweighted) "
                        f"{fidelity_text(sur, 'train', 'greedy')} train / "
                        f"{fidelity_text(sur, 'holdout', 'greedy')} holdout"),
        *_axis_rows(review),
        *([("Choice of tree", sur.note)] if sur.note else []),
        ("Certificate", certificate_line(review)),
        ("Solver", f"{_num(sur.certificate.get('time'), 3)} s; winning stage: {sur.winner}"),
        *evidence_rows(review),
        ("Decision", DECISION_TEXT.get(review.reviewer.decision, review.reviewer.decision)),
    ]
    flags = review.anatomy.flags
    for f in getattr(flags, "features", []):
        rows.append((f"Flagged ({f.flag})", f.statement()))
    doc.add(Heading("Summary"), KeyValues(rows))
    for note in relies.disagreements:
        doc.add(Paragraph(f"The importance measures disagree: {note}.", "note"))
    spots = weak_spots(review)
    if spots:
        doc.add(Heading("Weak spots", 2))
        for spot in spots:
            doc.add(Paragraph(spot.text, "note"))
    doc.add(Paragraph(CAUTIONS, "caution"))
    doc.add(Figure(surrogate_tree_figure(sur.surrogate, width=7.5), width=0.85,
                   caption="The surrogate's rules (yes to the left); details in the Surrogate "
                           "section"))


def _readback_text(readback) -> str:
    if not readback:
        return "not run (the program did not run)"
    verdict = "consistent" if readback.get("consistent") else "NOT consistent"
    return (f"{verdict}: the tree read from the solution routes the program's "
            f"{readback.get('points')} points with {readback.get('routing_mismatches')} "
            f"mismatches; disagreement {_num(readback.get('tree_disagreement'), 6)} (tree) "
            f"against {_num(readback.get('program_disagreement'), 6)} (program)")


def _holdout_text(review) -> str:
    intake = review.intake
    if intake.holdout_source == "file":
        return f"from {Path(review.inputs.holdout).name} ({review.holdout_data.n_rows} rows)"
    if intake.holdout_source == "split":
        return (f"{intake.holdout_rows.size} rows split off the review data "
                f"(stratified by the ensemble's class, seed {review.settings.seed})")
    return "none"


def _intake(doc: Document, review) -> None:
    intake, data = review.intake, review.intake.data_summary
    doc.add(Heading("Intake"))
    files = [["model", str(review.inputs.model), intake.model_sha256],
             ["data", str(review.inputs.data), intake.data_sha256]]
    if review.inputs.holdout:
        files.append(["holdout", str(review.inputs.holdout), intake.holdout_sha256])
    doc.add(Table(["file", "path", "sha256"], files, caption="Files reviewed"))
    notes = list(intake.notes)
    doc.add(KeyValues([
        ("Columns matched", f"by {data.get('matched_by', 'name')}"),
        ("Target column", str(review.inputs.target or "none")),
        ("Extra columns ignored", ", ".join(data.get("extra_columns") or []) or "none"),
        ("Exactness check", intake.exactness.text()),
    ]))
    missing = data.get("missing_values") or {}
    rows = [[name, int(n)] for name, n in missing.items() if n]
    if rows:
        doc.add(Table(["feature", "missing values"], rows,
                      caption="Missing values in the review data"))
    _model_inputs(doc, intake.summary)
    for note in notes:
        doc.add(Paragraph(note, "note"))
    _performance(doc, review)


def _performance(doc: Document, review) -> None:
    """The model's own performance on the review data (when it has the target)."""
    perf = getattr(review.intake, "performance", None)
    if perf is None:
        return
    doc.add(Heading("The model's own performance", 2))
    for line in perf.text().splitlines():
        doc.add(Paragraph(line, "caution" if line == perf.caution else "body"))
    classes = list(perf.classes)
    doc.add(Table(["true class"] + [f"predicted {c}" for c in classes],
                  [[c] + [int(v) for v in row] for c, row in zip(classes, perf.confusion)],
                  caption="Confusion matrix at the model's own rule (the class of largest "
                          "probability), review data"))
    doc.add(Table(["from", "to", "rows", "mean predicted", "observed share"],
                  [[b.lower, b.upper, b.count, b.mean_predicted, b.observed_share]
                   for b in perf.reliability],
                  caption=f"Reliability ({perf.reliability_definition})",
                  formats=[".2f", ".2f", ",d", ".3f", ".3f"]))
    doc.add(Figure(reliability_figure(perf), width=RELIABILITY_SHARE,
                   caption="Reliability: each bin's observed share against its mean predicted "
                           "probability (the rows of the table above) beside the diagonal of "
                           "perfect calibration; under it, the rows in each bin"))


value_text = fe.value_text  # a row's value as the data gives it (a category by name)


def _model_inputs(doc: Document, summary) -> None:
    """Categorical features, and a pipeline's estimator inputs with their raw columns."""
    cats = getattr(summary, "categorical", None) or {}
    if cats:
        doc.add(Paragraph(
            f"Categorical features: {', '.join(f'{n} ({k} categories)' for n, k in cats.items())}"
            f". {summary.categorical_splits:,} of the model's splits send sets of categories "
            "each way; the review names categories, never their codes.", "note"))
    inputs = getattr(summary, "input_usage", None)
    if inputs:
        doc.add(Paragraph(
            f"The model is a pipeline ({summary.estimator}). Its preprocessing was folded into "
            "the splits exactly, so the review speaks in the data file's raw columns; the "
            "estimator's own inputs and the splits on each are below (every other figure "
            "counts them for their raw column).", "note"))
        doc.add(Table(["estimator input", "raw column", "splits"],
                      [[u["input"], u["column"], u["splits"]] for u in inputs],
                      caption="Splits per estimator input of the pipeline"))


def sample_rows(review) -> list[list[str]]:
    """Which figures of the review were computed on a sample of the rows, and how large."""
    an, prox, sur = review.anatomy, review.proximity, review.surrogate
    rows = []

    def add(figure: str, sample: dict | None, n_all: int) -> None:
        text = (sample or {}).get("description") or f"all {n_all:,} rows"
        rows.append([figure, text])

    n = int(review.data.X.shape[0]) if review.data is not None else review.intake.summary.rows
    add("Exactness check", review.intake.exactness.sample, review.intake.exactness.rows)
    if an is not None and an.importance.has_permutation:
        setting = an.importance.permutation_setting or {}
        add("Permutation importance (standard error from the rows used)",
            setting.get("sample"), int(setting.get("n_rows", n)))
    if prox is not None:
        add("Proximity pairs and counts", getattr(prox, "sample", None), int(prox.rows.size))
    if sur is not None:
        n_train = int(review.intake.train_rows.size)
        add("Surrogate: must-link pairs", (sur.proximity or {}).get("searched"), n_train)
        notes = [st.get("note", "") for st in sur.stages
                 if st.get("name") in ("local_search", "polish")]
        searched = next((x.split("; ")[0].replace("searched on ", "") for x in notes
                         if x.startswith("searched on")), f"all {n_train:,} training rows")
        rows.append(["Surrogate: node-by-node search (every candidate scored on every "
                     "training row)", searched])
        points = (sur.certificate.get("sample") or {}).get("points")
        if points:
            rows.append(["Surrogate: the program", f"{int(points):,} representative points "
                         "(weighted) of the training rows"])
    fx = effects_of(review)
    if fx is not None:
        add("Effects: contributions, importance and curves", fx.sample, n)
        rows.append(["Effects: interactions", _interaction_rows_text(fx)])
    return rows


def _samples(doc: Document, review) -> None:
    doc.add(Table(["figure", "rows used"], sample_rows(review),
                  caption="Where the review used a sample of the rows (seeded; the seed is in "
                          "the settings)"))


def _anatomy(doc: Document, review) -> None:
    an, flags = review.anatomy, _flags(review)
    doc.add(PageBreak(), Heading("Anatomy: what the ensemble relies on"))
    doc.add(Paragraph("Each cell is the share of the ensemble's split nodes at that depth that "
                      "test the feature; the bars give the share over all depths."))
    doc.add(Figure(fa.depth_usage_figure(an.depth_usage["count"], flags),
                   caption="Share of the split nodes at each depth that test each feature "
                           "(nodes counted, not weighted)", width=0.95))
    doc.add(Figure(fa.position_map_figure(an.position_usage, flags),
                   caption="Feature use by node position in the top levels", width=1.0))
    doc.add(Figure(fa.importance_figure(an.importance, flags),
                   caption="Impurity and permutation importance", width=0.95))
    imp = an.importance
    rows = []
    for j in np.argsort(imp.impurity_rank, kind="stable"):
        row = [imp.feature_names[j], float(imp.impurity[j]), int(imp.impurity_rank[j])]
        if imp.has_permutation:
            se = imp.permutation_se
            row += [float(imp.permutation_mean[j]), float(imp.permutation_std[j]),
                    "n/a" if se is None else f"{float(se[j]):.4f}",
                    int(imp.permutation_rank[j])]
        rows.append(row)
    header = ["feature", "impurity", "rank"]
    formats = [None, ".4f", None]
    if imp.has_permutation:
        header += ["permutation (mean)", "(std)", "(se)", "rank"]
        formats += [".4f", ".4f", None, None]
    doc.add(Table(header, rows, caption="Importances and their ranks", formats=formats))
    doc.add(Paragraph(imp.caution, "note"))
    doc.add(Figure(fa.threshold_strips_figure(an.thresholds, flags=flags),
                   caption="Where the cut points fall on the review data", width=0.95))
    if getattr(an.flags, "features", None):
        doc.add(Heading("Flagged features", 2))
        doc.add(Table(["feature", "flag", "statement"],
                      [[f.feature, f.flag, f.statement()] for f in an.flags.features],
                      caption="Where flagged features appear"))


def _proximity(doc: Document, review) -> None:
    prox = review.proximity
    doc.add(Heading("Proximity: which records the ensemble treats alike"))
    doc.add(Paragraph(f"Proximity of two records: the {prox.definition}."))
    counts = prox.counts
    doc.add(Table(["proximity at least", "pairs", "share of all pairs"],
                  [[float(t), int(c), float(c) / max(counts.n_total_pairs, 1)]
                   for t, c in zip(counts.thresholds, counts.n_pairs)],
                  caption=f"Pairs of records by proximity ({counts.n_samples} records, "
                          f"{counts.n_total_pairs} pairs)", formats=[".2f", ",d", ".3%"]))
    used = review.surrogate.proximity
    doc.add(Paragraph(
        f"At the review's threshold of {prox.threshold:.2f}, {prox.n_pairs_at_threshold} pairs "
        f"qualify. The surrogate was asked to keep {used.get('pairs', 0)} training pairs "
        f"predicted alike by the ensemble in one leaf "
        f"({used.get('separated_pairs', 0)} ended up apart)."))


def _surrogate(doc: Document, review) -> None:
    sur, st = review.surrogate, review.settings
    est = sur.surrogate
    doc.add(PageBreak(), Heading("Surrogate: the ensemble as a few readable rules"))
    doc.add(Paragraph(
        f"A tree of depth {st.depth} whose splits compare a weighted sum of at most "
        f"{st.max_features_per_split or 'any number of'} features with a threshold, found by a "
        "mixed-integer linear program (HiGHS) that weighs each disagreement with the "
        "ensemble by the ensemble's confidence, beside a greedy tree (CART) of the same "
        "depth fit on the same targets and weights. Coefficients are rounded for reading and "
        "the rounded tree is the one scored."))
    doc.add(Figure(surrogate_tree_figure(est, width=7.5), caption="The surrogate tree",
                   width=1.0))
    doc.add(Code(est.rules_, caption="The rules in the data's units"))
    fid, wfid = sur.fidelity, sur.weighted_fidelity
    rows = []
    for part in ("train", "holdout", "full"):
        s, g = fid["surrogate"][part], fid["greedy"][part]
        rows.append([part, s, g, None if s is None else s - g,
                     wfid["surrogate"][part], wfid["greedy"][part]])
    doc.add(Table(["rows", "surrogate", "greedy", "difference", "surrogate (weighted)",
                   "greedy (weighted)"], rows, caption="Fidelity: share of rows where the "
                  "tree predicts the ensemble's class (unweighted; weighted: each row counts "
                  "by the ensemble's probability of its class)",
                  formats=[None, ".1%", ".1%", "+.1%", ".1%", ".1%"]))
    doc.add(Table(["leaf", "class", "train rows", "train coverage",
                   "train fidelity (unweighted)", "holdout rows",
                   "holdout fidelity (unweighted)"],
                  [[l["leaf"], l["class"], l["train_rows"], l["train_coverage"],
                    l["train_fidelity"], l["holdout_rows"], l["holdout_fidelity"]]
                   for l in sur.leaves if l.get("reachable", True)], caption="Leaves (a leaf no "
                  "row can reach is left out)",
                  formats=[None, None, ",d", ".1%", ".1%", ",d", ".1%"]))
    _groups(doc, review)
    stability_section(doc, review)
    cert = sur.certificate
    doc.add(Heading("Solver certificate", 2))
    doc.add(KeyValues([
        ("In words", certificate_line(review)),
        ("Status", str(cert.get("status"))),
        ("Objective", _num(cert.get("objective"), 6)),
        ("Proven bound", f"{_num(cert.get('bound'), 6)} (every training row; "
                         f"method: {cert.get('bound_method') or 'the program, on its sample'})"),
        ("Gap", _num(cert.get("gap"), 4)),
        ("Proof", _proof_text(cert.get("proof"))),
        ("Program's own bound", f"{_num(cert.get('program_bound'), 6)} (on its sample only)"),
        ("Time", f"{_num(cert.get('time'), 4)} s (build {_num(cert.get('build_time'), 3)} s, "
                 f"solve {_num(cert.get('solve_time'), 3)} s)"),
        ("Limits", f"time {st.time_limit:g} s, nodes {st.node_limit or 'none'}"),
        ("Program sample", f"{sur.sample_size} points" if sur.sample_size else "not run"),
        ("Read-back check", _readback_text(cert.get("readback"))),
        ("Solver", f"{cert.get('solver')} {cert.get('versions', {}).get('highs', '')}".strip()),
    ]))
    doc.add(Table(["stage", "objective", "weighted fidelity", "ready at (s)", "note"],
                  [[s.get("name"), s.get("objective"), s.get("fidelity"), s.get("elapsed"),
                    s.get("note") or ""] for s in sur.stages],
                  caption="Candidates by stage, each scored on every training row (the best "
                          f"one is kept{_choice_words(sur)})",
                  formats=[None, ".5f", ".4f", ".2f", None]))
    doc.add(Paragraph("The proven bound holds for every tree of this depth and features per "
                      "split on every training row; the program's own bound covers only the "
                      "points it saw, and its big-M relaxation is weak, so it seldom leaves 0. "
                      "Each proven part's program can be written as MPS and solved again "
                      "(grovewise surrogate ... --out DIR writes them to DIR/proof).", "note"))


IMPORTANCE_ROWS = 20  # features in the Effects section's importance table at most


def _interaction_rows_text(fx) -> str:
    n, size = int(fx.interaction_rows), int(fx.sample.get("size", 0))
    return ("every row of the effects' sample" if n >= size else
            f"the first {n:,} of the effects' sample rows")


def _effects_sample_sentence(fx) -> str:
    """Which rows the effects were computed on, in one sentence."""
    n, size = int(fx.interaction_rows), int(fx.sample.get("size", 0))
    pairs = "on all of them" if n >= size else f"on the first {n:,} of them"
    from ..effects_summary import INTERACTION_FEATURES

    return (f"Computed on {fx.sample.get('description', f'{size:,} rows')}; the interactions "
            f"{pairs}, among the {INTERACTION_FEATURES} features of largest mean "
            "|contribution|. A large forest gets fewer rows, by a work budget set by its size "
            "alone, so the effects take seconds and a re-run draws the same sample.")


def _output_text(fx) -> str:
    if fx.output == "probability":
        return ("the ensemble's predicted probability of each class (an averaging forest: "
                "the contributions of a row add up, with the base, to its probabilities)")
    return ("the ensemble's raw margin (log-odds) before the logistic or softmax link (a "
            "boosted model: the contributions of a row add up, with the base, to its margin)")


def _effects(doc: Document, review) -> None:
    fx = effects_of(review)
    if fx is None:
        return
    flags = _flags(review)
    doc.add(PageBreak(), Heading("Effects: what the ensemble does with its features"))
    doc.add(Paragraph(
        "These figures read the ensemble itself, not the surrogate. A feature's contribution "
        "to a row's output is its Shapley value, computed exactly on the trees with "
        "path-dependent TreeSHAP (Lundberg, Erion & Lee 2018); the output explained is "
        f"{_output_text(fx)}. The pairs the ensemble combines are ranked by Shapley "
        "interaction values (Lundberg et al. 2020). The curves are partial dependence "
        "(Friedman 2001) and accumulated local effects (Apley & Zhu 2020), both in predicted "
        "probability. " + _effects_sample_sentence(fx)))
    _effects_importance(doc, review, fx)
    doc.add(Figure(fe.effect_curves_figure(fx, flags), width=1.0,
                   caption=f"Effect curves of the {len(fx.curves)} features the ensemble "
                           "relies on most by mean |contribution|, with its own cut points and "
                           "the surrogate's cuts"))
    untested = []
    for curve in fx.curves:
        if curve.cuts:
            doc.add(Paragraph(" ".join(cut.statement for cut in curve.cuts)))
        else:
            untested.append(curve.feature)
    if untested:
        doc.add(Paragraph(f"The surrogate does not test {_and(untested)}."))
    doc.add(Figure(fe.interaction_figure(fx, flags), width=1.0,
                   caption="The feature pairs the ensemble combines most, and the pairs the "
                           "surrogate puts in one split"))
    doc.add(Paragraph(fx.pair_statement))


def _and(names: list[str]) -> str:
    return names[0] if len(names) == 1 else f"{', '.join(names[:-1])} or {names[-1]}"


def _effects_importance(doc: Document, review, fx) -> None:
    imp = review.anatomy.importance
    names = list(imp.feature_names)
    ranks = contribution_ranks(review)
    order = np.lexsort((np.arange(len(names)), ranks))
    rows = []
    for j in order[:IMPORTANCE_ROWS]:
        row = [names[j], float(fx.importance[names[j]]), int(ranks[j]), float(imp.impurity[j]),
               int(imp.impurity_rank[j])]
        if imp.has_permutation:
            row += [float(imp.permutation_mean[j]), int(imp.permutation_rank[j])]
        rows.append(row)
    header = ["feature", "mean |contribution|", "rank", "impurity", "rank"]
    formats = [None, ".4f", None, ".4f", None]
    if imp.has_permutation:
        header += ["permutation (mean)", "rank"]
        formats += [".4f", None]
    more = len(names) - len(rows)
    doc.add(Table(header, rows, formats=formats,
                  caption="Global importance: mean |contribution| over the sampled rows (summed "
                          "over the outputs) beside impurity and permutation importance"
                          + (f"; {more} features of lower rank are not listed" if more else "")))
    doc.add(Paragraph(f"The ensemble relies most on {reliance_text(review_reliance(review))}."))


def _case_contributions(doc: Document, review, fx) -> None:
    """The explained disagreement rows: each row's three largest contributions, and the most
    confident row as a figure."""
    if fx is None or not len(fx.case_rows):
        return
    forest, X = review.forest, review.case_rows()
    names = list(forest.feature_names)
    rows, quantities = [], set()
    for c, i in enumerate(fx.case_rows):
        o = fe.case_output(fx, c)
        v = fx.case_values[c][:, o]
        quantities.add(fe.output_label(fx, o))
        top = [int(j) for j in np.argsort(-np.abs(v), kind="stable")[:3]]
        cells = [f"{names[j]} = {value_text(forest, j, X[i, j])}: "
                 + f"{v[j]:+.3f}".replace("-", "\u2212") for j in top]
        rows.append([int(i) + 1, str(fx.output_names[o]), float(fx.case_base[o] + v.sum())]
                    + cells + [None] * (3 - len(cells)))
    what = ("probability of its class" if fx.output == "probability" else
            next(iter(quantities)) if len(quantities) == 1 else "margin of its class")
    doc.add(Table(["row", "ensemble's class" if fx.output == "probability" else "output",
                   "base + contributions", "largest contribution", "second", "third"], rows,
                  caption=f"What moves the ensemble on these rows: the three largest "
                          f"contributions (Shapley values) to the ensemble's {what}, each as "
                          "feature = the row's value: contribution",
                  formats=[None, None, ".3f", None, None, None]))
    first = int(fx.case_rows[0])
    doc.add(Figure(fe.case_contributions_figure(fx, forest, X[first], 0,
                                                row_label=f"Row {first + 1}",
                                                flags=_flags(review)), width=1.0,
                   caption=f"Row {first + 1}, the disagreement where the ensemble is most "
                           "confident: its largest contributions"))


def path_features(est, leaf: int) -> list[int]:
    """The features the splits on the path from the root to ``leaf`` use, root first."""
    tree = est.tree_
    nb = tree.coef.shape[0]
    node, path = nb + int(leaf), []
    while node > 0:
        node = (node - 1) // 2
        path.append(node)
    used: list[int] = []
    for t in reversed(path):
        used += [int(j) for j in np.flatnonzero(tree.coef[t]) if int(j) not in used]
    return used


def _cases(doc: Document, review) -> None:
    cases, names = review.cases, review.forest.feature_names
    classes = list(review.forest.classes_)
    doc.add(Heading("Cases where the surrogate and the ensemble disagree"))
    n = cases.ensemble.size
    doc.add(Paragraph(f"The surrogate agrees with the ensemble on {pct(cases.agreement)} of "
                      f"{n} rows; it disagrees on {cases.disagreements.size}. The rows below are "
                      "the disagreements where the ensemble is most confident, with the values "
                      "of the features their path through the rules tests. " + ROW_NUMBERING))
    if not cases.disagreements.size:
        return
    pick = cases.confident_disagreements(DISAGREEMENT_ROWS)
    X = review.case_rows()
    est = review.surrogate.surrogate
    rows = []
    for i in pick:
        feats = path_features(est, int(cases.surrogate_leaf[i]))
        values = ", ".join(f"{names[j]} = {value_text(review.forest, j, X[i, j])}"
                           for j in feats) or "none (one leaf)"
        rows.append([int(i) + 1, ("train", "holdout", "holdout file")[int(cases.split[i])],
                     classes[cases.ensemble[i]], float(cases.proba[i, cases.ensemble[i]]),
                     classes[cases.surrogate[i]], int(cases.surrogate_leaf[i]), values])
    doc.add(Table(["row", "part", "ensemble", "its probability", "surrogate", "leaf",
                   "features on its path"], rows,
                  caption="Disagreements (most confident first)",
                  formats=[None, None, None, ".3f", None, None, None]))
    _case_contributions(doc, review, effects_of(review))


def _limitations(doc: Document, review) -> None:
    doc.add(Heading("Limitations and cautions"))
    items = [CAUTIONS,
             "Rows with missing values are routed through the surrogate after replacing each "
             "missing value by the training median shown in the settings; the ensemble itself "
             "uses its own missing-value directions.",
             "Proximity counts shared leaves; for boosted models every tree counts the same, "
             "although boosted trees model residuals rather than the class.",
             "Impurity importance favours features with many distinct values (Strobl et al. "
             "2007); read it beside permutation importance."]
    if effects_of(review) is not None:
        items.append("Contributions and effect curves describe what the model does with its "
                     "inputs, not causes in the data. Partial dependence averages over rows "
                     "with the feature set to values that may not occur together with their "
                     "other features; accumulated local effects only move rows within their "
                     "own interval (Apley & Zhu 2020), so read the two together.")
    for text in items:
        doc.add(Paragraph(text, "caution" if text is CAUTIONS else "body"))


def _reproduce(doc: Document, review) -> None:
    st = review.settings
    doc.add(Heading("How to reproduce this review"))
    doc.add(Paragraph(
        "The manifest (manifest.json beside this report) records the files' sha256, every "
        "setting and seed, the library versions and a digest of each step's results. Run "
        "`grovewise reproduce manifest.json` with the same files: it re-runs the review and "
        + ("compares every digest exactly (the solve was bounded by its node limit)."
           if deterministic(review) else
           "compares the digests of intake, anatomy and proximity exactly, and the fidelity "
           "within 0.02 (the solve was bounded by the clock, so its tree may differ).")))
    settings = [(k, setting_text(v)) for k, v in review.settings_dict().items()]
    settings.append(("missing values (surrogate)", "training medians"))
    doc.add(KeyValues(settings, caption="Settings"))
    doc.add(KeyValues(list(library_versions().items()), caption="Library versions"))
    doc.add(Paragraph(f"Seed {st.seed} drives the holdout split, permutation importance, the "
                      "proximity sample, the surrogate and the effects' sample.", "note"))


def _signoff(doc: Document, review) -> None:
    rv = review.reviewer
    doc.add(Heading("Sign-off"))
    doc.add(KeyValues([("Reviewer", rv.name or "not named"), ("Role", rv.role or "not given"),
                       ("Decision", DECISION_TEXT.get(rv.decision, rv.decision)),
                       ("Conditions", rv.conditions or "none"), ("Notes", rv.notes or "none"),
                       ("Signed", rv.signed_at or "not signed")]))


def export_report(review, folder, formats=("html", "pdf"),
                  date: _dt.datetime | None = None, progress=None,
                  saved_review=None) -> dict[str, Path]:
    """Write the report (HTML and/or PDF) and ``manifest.json`` into ``folder``, atomically.

    ``progress(step, fraction, message)`` hears of each part (step ``"report"``).
    ``saved_review``: the folder the review was saved to; its files' sha256 go into the
    manifest, so that ``reproduce`` names any of them changed afterwards.
    Returns the paths written by kind (``html``, ``pdf``, ``manifest``).
    """
    report = progress or (lambda *_: None)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    report("report", 0.1, "drawing the figures")
    doc = review_document(review, date=date)
    out: dict[str, Path] = {}
    if "html" in formats:
        report("report", 0.4, "writing report.html")
        out["html"] = write_atomic(folder / "report.html", render_html(doc))
    if "pdf" in formats:
        report("report", 0.6, "writing report.pdf")
        render_pdf(doc, folder / "report.pdf")
        out["pdf"] = folder / "report.pdf"
    files = {k: {"path": p.name, "sha256": sha256_of(p)} for k, p in out.items()}
    manifest = build_manifest(review, report_files=files)
    manifest["inputs"] = _relative_inputs(manifest["inputs"], folder)
    if saved_review is not None:
        manifest["saved_review"] = saved_review_entry(saved_review, folder)
    out["manifest"] = write_atomic(folder / "manifest.json", json.dumps(manifest, indent=1))
    return out


def _relative_inputs(inputs: dict, folder: Path) -> dict:
    """Input paths relative to the manifest's folder when possible (so the folder moves)."""
    import os

    out = dict(inputs)
    for key in ("model", "data", "holdout"):
        entry = out.get(key)
        if entry:
            p = Path(entry["path"]).resolve()
            try:
                entry = {**entry, "path": os.path.relpath(p, folder.resolve())}
            except ValueError:  # another drive
                entry = {**entry, "path": str(p)}
            out[key] = entry
    return out
