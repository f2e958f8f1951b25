"""The Effects section of the report, its figures, and ``grovewise effects``.

The bundled sample is reviewed once with a node limit (every stage stops on counts, so the
review is deterministic), a surrogate of depth 1 (one oblique split: a cut on each of two
curves, one pair) and small samples for the effects, so that the file runs in under a
minute.

Outside references: poppler's pdftotext / pdfimages / pdftoppm read the PDF back; Python's
html.parser reads the HTML back; scikit-learn's own ``predict_proba`` of the sample model is
what each row's contributions must add up to; the importance of ``grovewise effects`` is
recomputed here from ``gw.contributions`` on the same rows with numpy.
"""

import csv
import json
import math
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pytest
from matplotlib.text import Text

import grovewise as gw
from grovewise.batch import write_review_folder
from grovewise.cli import main
from grovewise.hashing import sha256_of
from grovewise.report import figures_effects as fe
from grovewise.report.pdf_report import FIGURE_DPI, PAGE_H, PAGE_W
from grovewise.reproduce import reproduce
from grovewise.review import Review, ReviewInputs, ReviewSettings
from grovewise.sample_data import sample_paths
from grovewise.sampling import stratified_rows

ROWS, PAIR_ROWS, SEED = 300, 60, 1
SETTINGS = dict(depth=1, time_limit=60, node_limit=20, permutation_repeats=1,
                permutation_rows=500, exactness_rows=1000, proximity_rows=300, seed=SEED,
                effects_rows=ROWS, interaction_rows=PAIR_ROWS, stability_resamples=0)
POPPLER = all(shutil.which(t) for t in ("pdftotext", "pdfimages", "pdftoppm"))
needs_poppler = pytest.mark.skipif(not POPPLER, reason="poppler-utils is not installed; "
                                   "`.ci/run` installs it")


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The sample reviewed (node-limited), its folder written: saved review, report, manifest."""
    folder = tmp_path_factory.mktemp("effects_report")
    paths = sample_paths()
    model = shutil.copy(paths["forest"], folder / "model.skops")
    data = shutil.copy(paths["data"], folder / "data.csv")
    out = folder / "review_out"
    review, _ = write_review_folder(ReviewInputs(model, data, target=paths["target"]),
                                    ReviewSettings(**SETTINGS), out)
    return out, review


def _flat(text: str) -> str:
    return " ".join(text.split())


class _Text(HTMLParser):
    def __init__(self):
        super().__init__()
        self.parts = []

    def handle_data(self, data):
        self.parts.append(data)


def _html_text(path) -> str:
    parser = _Text()
    parser.feed(path.read_text(encoding="utf-8"))
    return _flat(" ".join(parser.parts))


def _pdf_text(path, page=None) -> str:
    pages = ["-f", str(page), "-l", str(page)] if page else []
    return _flat(subprocess.run(["pdftotext", *pages, str(path), "-"], capture_output=True,
                                text=True, check=True).stdout)


def _sentences(fx):
    sample = (f"Computed on a sample of {ROWS} of 3,000 rows (seed {SEED}, stratified by the "
              f"predicted class); the interactions on the first {PAIR_ROWS} of them, among the "
              "8 features of largest mean |contribution|.")
    cut = next(c.statement for curve in fx.curves for c in curve.cuts)
    return sample, cut, fx.pair_statement


@needs_poppler
def test_the_report_states_the_effects_from_the_saved_review(written):
    out, _ = written
    saved = Review.open(out / "review")
    fx = saved.cases.effects
    assert fx.sample["size"] == ROWS and fx.interaction_rows == PAIR_ROWS
    html, pdf = _html_text(out / "report.html"), _pdf_text(out / "report.pdf")
    for text in (html, pdf):
        assert "Effects: what the ensemble does with its features" in text
        assert "path-dependent TreeSHAP" in text and "accumulated local effects" in text
        for sentence in _sentences(fx):
            assert sentence in text, sentence
        # what the model relies on now counts the mean |contribution| as a third measure
        assert ("(by the mean rank of impurity importance, permutation importance and mean "
                "|contribution|)") in text
    # every stated figure is the saved one: the importance table ...
    for name, value in fx.importance.items():
        assert f"{name} {value:.4f}" in html, name
    # ... and each explained disagreement's largest contribution, re-derived with numpy from
    # the saved arrays (the output read: the ensemble's class, argmax of base + contributions)
    X = saved.case_rows()
    names = saved.forest.feature_names
    for c, i in enumerate(fx.case_rows):
        o = int(np.argmax(fx.case_base + fx.case_values[c].sum(axis=0)))
        j = int(np.argmax(np.abs(fx.case_values[c][:, o])))
        value = f"{X[i, j]:.4g}"
        sign = f"{fx.case_values[c][j, o]:+.3f}".replace("-", "\u2212")
        assert f"{i + 1} {fx.output_names[o]} " in html
        assert f"{names[j]} = {value}: {sign}" in html, (i, names[j])
    # the rows explained are the rows of the disagreement table
    assert fx.case_rows.tolist() == saved.cases.confident_disagreements(12).tolist()


@needs_poppler
def test_the_effects_figures_print_at_their_size_and_render(written, tmp_path):
    out, review = written
    pdf = out / "report.pdf"
    n_pages = int(next(line.split()[-1] for line in subprocess.run(
        ["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout.splitlines()
        if line.startswith("Pages")))
    page = next(p for p in range(1, n_pages + 1)
                if "Effect curves of the 6 features" in _pdf_text(pdf, p))
    # printed scale of the curves figure: rasterised at FIGURE_DPI, so its ppi on the page
    # says how much it was shrunk; no text under 6 pt once printed
    listing = subprocess.run(["pdfimages", "-f", str(page), "-l", str(page), "-list",
                              str(pdf)], capture_output=True, text=True, check=True).stdout
    ppi = min(int(line.split()[12]) for line in listing.splitlines()[2:] if line.strip())
    scale = FIGURE_DPI / ppi
    fx = review.cases.effects
    figures = [fe.effect_curves_figure(fx), fe.interaction_figure(fx),
               fe.case_contributions_figure(fx, review.forest,
                                            review.case_rows()[fx.case_rows[0]])]
    for fig in figures:
        fig.canvas.draw()
        sizes = [t.get_fontsize() for t in fig.findobj(Text)
                 if t.get_visible() and t.get_text().strip()]
        assert min(sizes) * min(scale, 1.0) >= 6.0, min(sizes)
    assert scale > 0.97
    # the page itself, rendered as poppler draws it: A4 at 60 dpi, with the curves' colour
    from PIL import Image

    subprocess.run(["pdftoppm", "-r", "60", "-f", str(page), "-l", str(page), "-png",
                    str(pdf), str(tmp_path / "page")], check=True)
    png = next(tmp_path.glob("page*.png"))
    image = Image.open(png)
    assert image.size == (math.ceil(PAGE_W / 72 * 60), math.ceil(PAGE_H / 72 * 60))
    rgb = np.asarray(image.convert("RGB"), dtype=int)
    accent = np.abs(rgb - np.array([0x44, 0x77, 0xAA])).sum(axis=2) < 40
    assert accent.sum() > 200  # the partial-dependence lines are drawn


def test_reproduce_passes_and_a_changed_saved_effect_is_named(written, tmp_path, capsys):
    out, _ = written
    assert main(["reproduce", str(out / "manifest.json")]) == 0
    said = capsys.readouterr().out
    assert "re-fit cases results: identical" in said and "verdict: reproduced" in said
    shutil.copytree(out.parent, tmp_path / "copy")  # the model and data files beside it
    copy = tmp_path / "copy" / out.name
    saved = copy / "review" / "review.json"
    doc = json.loads(saved.read_text())

    def effects_state(node):
        if isinstance(node, dict):
            if node.get("__type__") == "grovewise.effects_summary:EffectsResult":
                return node["state"]
            node = list(node.values())
        if isinstance(node, list):
            for child in node:
                found = effects_state(child)
                if found is not None:
                    return found
        return None

    importance = effects_state(doc)["importance"]["__map__"]
    top = max(importance, key=importance.get)
    importance[top] = round(importance[top] + 0.0001, 6)  # one stated figure, changed
    saved.write_text(json.dumps(doc, indent=1))
    verdict = reproduce(copy / "manifest.json", refit=False)
    assert "saved review file review/review.json" in verdict.failed()
    # even with the file's hash forged in the manifest, the cases step's digest names it
    manifest = json.loads((copy / "manifest.json").read_text())
    manifest["saved_review"]["files"]["review.json"] = sha256_of(saved)
    (copy / "manifest.json").write_text(json.dumps(manifest, indent=1))
    verdict = reproduce(copy / "manifest.json", refit=False)
    assert verdict.failed() == ["manifest.json figures against the saved review"]
    assert "cases results differ from the digest stated" in verdict.text()


def test_the_effects_command_writes_what_it_says(tmp_path, capsys):
    from grovewise.loaders import load_native

    paths = sample_paths()
    out = tmp_path / "effects"
    args = ["effects", str(paths["forest"]), str(paths["data"]), "--target", paths["target"],
            "--out", str(out), "--rows", str(ROWS), "--interaction-rows", str(PAIR_ROWS),
            "--seed", str(SEED), "--dpi", "100"]
    assert main(args) == 0
    said = capsys.readouterr().out
    names = ["contributions.csv", "contribution_importance.csv", "interaction_pairs.csv",
             "effect_curves.json", "effect_curves.png", "effect_curves.svg",
             "interaction_pairs.png", "interaction_pairs.svg", "effects.json"]
    assert sorted(p.name for p in out.iterdir()) == sorted(names)
    assert all(name in said for name in names)
    assert f"a sample of {ROWS} of 3,000 rows (seed {SEED}" in said
    # reference: gw.contributions on the same stratified rows, mean |value| by numpy
    forest = gw.load_model(paths["forest"])
    X = gw.load_data(paths["data"], forest=forest, target=paths["target"]).X
    rows = stratified_rows(forest.predict_index(X), X.shape[0], ROWS, SEED).rows
    c = gw.contributions(forest, X[rows])
    expected = dict(zip(forest.feature_names, np.abs(c.values).mean(axis=0).sum(axis=1)))
    with open(out / "contribution_importance.csv", newline="") as fh:
        table = list(csv.DictReader(fh))
    assert [r["feature"] for r in table] == sorted(expected, key=lambda n: -expected[n])
    for r in table:
        assert float(r["mean_abs_contribution"]) == pytest.approx(expected[r["feature"]],
                                                                   abs=1e-12)
    # each sampled row's contributions add up, with the base, to scikit-learn's own
    # predict_proba of the sample model
    with open(out / "contributions.csv", newline="") as fh:
        per_row = list(csv.DictReader(fh))
    assert [int(r["row"]) for r in per_row] == (rows + 1).tolist()
    proba = load_native(paths["forest"]).predict_proba(X[rows])
    for k, label in enumerate(str(v) for v in forest.classes_):
        total = np.array([float(r[f"base [{label}]"]) + sum(
            float(r[f"{n} [{label}]"]) for n in forest.feature_names) for r in per_row])
        assert np.abs(total - proba[:, k]).max() <= 1e-9
    curves = json.loads((out / "effect_curves.json").read_text())["curves"]
    assert [cv["feature"] for cv in curves] == sorted(expected, key=lambda n: -expected[n])[:6]
    assert all(not cv["surrogate_cuts"] for cv in curves)  # no surrogate: no surrogate cuts
    from PIL import Image

    # 6.5 in wide at 100 dpi; three rows of panels: 1.9 in each, 2.3 in of title and notes
    assert Image.open(out / "effect_curves.png").size == (650, 800)


def test_the_effects_command_checks_its_input(tmp_path, capsys):
    paths = sample_paths()
    base = ["effects", str(paths["forest"]), str(paths["data"]), "--target", paths["target"]]
    a_file = tmp_path / "taken"
    a_file.write_text("not a folder")
    assert main(base + ["--out", str(a_file)]) == 2
    assert "is a file; give a folder" in _flat(capsys.readouterr().err)
    assert main(base + ["--out", str(tmp_path / "x"), "--features", "age_years,shoe_size"]) == 2
    assert "shoe_size is not among the model's features" in _flat(capsys.readouterr().err)
    assert main(base + ["--out", str(tmp_path / "x"), "--rows", "5"]) == 2
    assert "--rows 5 is out of range" in _flat(capsys.readouterr().err)
    out = tmp_path / "chosen"
    assert main(base + ["--out", str(out), "--rows", "100", "--interaction-rows", "20",
                        "--features", "bmi,age_years"]) == 0
    curves = json.loads((out / "effect_curves.json").read_text())["curves"]
    assert [cv["feature"] for cv in curves] == ["bmi", "age_years"]
