"""Report sections on the evidence beside the rules: how stable they are over bootstrap
re-fits, and a second model reviewed beside the first."""

from __future__ import annotations

from ..surrogate.stability import TREE_LABELS, TREES
from .document import Document, Heading, KeyValues, Paragraph, Table


def _interval(ci) -> str:
    return "n/a" if not ci else f"{ci[0]:.1%} to {ci[1]:.1%}"


def stability_section(doc: Document, review) -> None:
    """Stability of the rules: per node, how often the review's split features recur over
    the bootstrap re-fits, for the surrogate and the greedy tree."""
    stab = getattr(review, "stability", None)
    if stab is None:
        why = ("the setting stability_resamples is 0" if review.settings.stability_resamples
               == 0 else "the stability step has not run in this review")
        doc.add(Heading("Stability of the rules", 2), Paragraph(f"Not measured: {why}.", "note"))
        return
    doc.add(Heading("Stability of the rules", 2))
    doc.add(Paragraph(
        f"The surrogate and the greedy tree were fitted again on {stab.resamples} bootstrap "
        f"resamples of the training rows (seed {stab.seed}; each re-fit {stab.time_limit:g} s, "
        f"its other settings as the review's). A node's features recur when the re-fitted "
        f"tree splits there on exactly the same features; agreement and fidelity are measured "
        f"on the {stab.rows:,} {stab.evaluated_on} rows. The rules are called unstable when "
        "the root's features change in more than half of the resamples.", "note"))
    for name in TREES:
        doc.add(Paragraph(stab.sentence(name)))
        doc.add(Table(["node", "the review's features", "recur in", "most common over the "
                       "re-fits", "its share"], stab.to_rows(name),
                      caption=f"Recurrence of the {TREE_LABELS[name]}'s split features per node"))
    rows = []
    for name in TREES:
        t = stab.trees[name]
        f = t.fidelity_spread()
        rows.append([name, t.root_recurrence, t.pairwise_agreement, f["min"], f["mean"],
                     f["max"], f["std"]])
    doc.add(Table(["tree", "root recurs", "mutual agreement", "fidelity least", "mean",
                   "largest", "std"], rows,
                  caption=f"Re-fitted trees side by side ({stab.evaluated_on} rows)",
                  formats=[None, ".0%", ".1%", ".1%", ".1%", ".1%", ".2%"]))


def second_model_section(doc: Document, review) -> None:
    """A second model beside the first: usage side by side, agreement of their classes,
    and whether the first model's surrogate explains the second."""
    sm = getattr(review, "second_model", None)
    if sm is None:
        return
    cmp = sm.comparison
    doc.add(Heading(f"A second model beside it: {sm.label}"))
    doc.add(Paragraph(sm.sentence()))
    doc.add(KeyValues([("Second model", f"{sm.label} (sha256 {sm.sha256[:16]}...)"),
                       ("Read exactly", sm.exactness or "checked")]))
    K = len(sm.classes)
    doc.add(Table(["first model's class"] + [f"second: {c}" for c in sm.classes],
                  [[str(sm.classes[i])] + [int(sm.cross[i, j]) for j in range(K)]
                   for i in range(K)],
                  caption=f"Classes of the two models on the {sm.rows:,} rows",
                  formats=[None] + [",d"] * K))
    if sm.explains:
        rows = [[name, e["to_first"], _interval(e["to_first_ci"]), e["to_second"],
                 _interval(e["to_second_ci"])] for name, e in sm.explains.items()]
        doc.add(Table(["tree", "agrees with the first", "95% interval",
                       "agrees with the second", "95% interval"], rows,
                      caption=f"Does the first model's surrogate explain the second? "
                              f"({sm.evaluated_on} rows)",
                      formats=[None, ".1%", None, ".1%", None]))
    order = sorted(range(len(cmp.feature_names)),
                   key=lambda j: -(cmp.overall_a[j] + cmp.overall_b[j]))
    ra, rb = cmp.rank_a, cmp.rank_b
    doc.add(Table(["feature", "share of splits, first", "second", "importance rank, first",
                   "second", ""],
                  [[cmp.feature_names[j], float(cmp.overall_a[j]), float(cmp.overall_b[j]),
                    int(ra[j]), int(rb[j]), cmp.status(cmp.feature_names[j])]
                   for j in order[:20]],
                  caption="Feature usage side by side (the 20 most used features)",
                  formats=[None, ".1%", ".1%", "d", "d", None]))


def evidence_rows(review) -> list[tuple[str, str]]:
    """The summary's lines on the rules' stability and on a second model."""
    rows = []
    stab = getattr(review, "stability", None)
    if stab is not None:
        rows.append(("Stability", stab.sentence("surrogate")))
    sm = getattr(review, "second_model", None)
    if sm is not None:
        rows.append(("Second model", f"{sm.label}: {sm.sentence()}"))
    return rows
