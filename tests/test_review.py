"""The review end to end: pipeline, report (HTML and PDF read back), manifest, reproduction,
atomic writes and reopening.

Outside references: poppler's pdftotext / pdfinfo / pdftoppm read the PDF back; Python's
html.parser reads the HTML back; hashlib's sha256 identifies the files.
"""

import json
import shutil
import signal
import subprocess
import sys
import textwrap
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from certificate_lines import assert_certificate_line
import skops.io as sio
from sklearn.ensemble import RandomForestClassifier

from grovewise.cli import main
from grovewise.report.content import export_report
from grovewise.reproduce import reproduce
from grovewise.review import STEPS, Review, ReviewInputs, Reviewer, ReviewSettings
from grovewise.sample_data import sample_paths

FAST = dict(depth=2, time_limit=6.0, permutation_repeats=2, seed=3, stability_resamples=2)
POPPLER = shutil.which("pdftotext") and shutil.which("pdfinfo") and shutil.which("pdftoppm")
needs_poppler = pytest.mark.skipif(not POPPLER, reason="poppler-utils (pdftotext) not installed; "
                                   ".ci/run installs it")


@pytest.fixture(scope="module")
def sample_review(tmp_path_factory):
    """The bundled sample reviewed once, with a short time limit, report written."""
    folder = tmp_path_factory.mktemp("sample_review")
    paths = sample_paths()
    # Copies, so a test may change a byte of the data without touching the package.
    model = shutil.copy(paths["forest"], folder / "model.skops")
    data = shutil.copy(paths["data"], folder / "data.csv")
    review = Review(ReviewInputs(model, data, target=paths["target"]),
                    ReviewSettings(**FAST, flags={"age_years": "protected"}),
                    Reviewer(name="R. Okafor", role="model validator", decision="approve_with_conditions",
                             conditions="re-review after retraining", notes="sample run"))
    review.run()
    out = folder / "report"
    files = export_report(review, out)
    return review, files, folder


def test_every_step_has_results(sample_review):
    review, files, _ = sample_review
    assert set(review.results) == set(STEPS)
    assert review.second_model is None and review.stability.resamples == 2
    assert review.intake.exactness.passed
    assert review.intake.exactness.max_abs_proba_diff <= 1e-9
    fid = review.surrogate.fidelity
    # The surrogate is never worse than the greedy tree on its own training rows.
    assert review.surrogate.weighted_fidelity["surrogate"]["train"] >= \
        review.surrogate.weighted_fidelity["greedy"]["train"] - 1e-12
    assert 0.8 < fid["surrogate"]["holdout"] <= 1.0
    n = review.data.X.shape[0]
    assert review.cases.ensemble.shape == (n,)
    np.testing.assert_array_equal(review.cases.ensemble, review.forest.predict_index(review.data.X))
    assert review.intake.train_rows.size + review.intake.holdout_rows.size == n
    assert set(files) == {"html", "pdf", "manifest"}


def test_fidelity_per_group_of_the_protected_feature(sample_review):
    # Reference: pandas over the holdout rows (quantile bins recomputed here) and scipy's
    # binomtest(...).proportion_ci(method="wilson") for the intervals.
    import pandas as pd
    from scipy.stats import binomtest

    review = sample_review[0]
    sur = review.surrogate
    [gf] = sur.group_fidelity
    assert gf.name == "age_years"
    X, held = review._surrogate_rows()
    labels = review.forest.classes_[np.argmax(review.rows_proba(), axis=1)]
    agree = sur.surrogate.predict(review.filled(X)) == labels
    age = X[held, review.forest.feature_names.index("age_years")]
    edges = np.unique(np.quantile(age, np.linspace(0, 1, 6)))
    frame = pd.DataFrame({"bin": np.clip(np.searchsorted(edges, age, side="right") - 1, 0,
                                         len(edges) - 2), "agree": agree[held]})
    got = frame.groupby("bin")["agree"].agg(["sum", "count"])
    assert [g.rows for g in gf.groups] == got["count"].tolist()
    for g, (k, n) in zip(gf.groups, got.itertuples(index=False)):
        assert g.fidelity["surrogate"] == pytest.approx(k / n)
        ci = binomtest(int(k), int(n)).proportion_ci(method="wilson")
        assert g.interval["surrogate"] == pytest.approx((ci.low, ci.high))
        assert g.too_small == (n < 30)
    assert "By age_years, the surrogate's fidelity ranges from" in gf.sentence()


def test_the_models_own_performance_is_scikit_learns(sample_review):
    # Reference: scikit-learn's roc_auc_score, brier_score_loss and confusion_matrix on the
    # same rows (the review data with its target) and the model's own probabilities.
    from sklearn.metrics import brier_score_loss, confusion_matrix, roc_auc_score

    review = sample_review[0]
    perf = review.intake.performance
    y, proba, classes = review.data.y, review.predicted_proba(), review.forest.classes_
    positive = y == classes[1]
    assert perf.n_rows == y.shape[0]
    assert perf.roc_auc == pytest.approx(roc_auc_score(positive, proba[:, 1]), abs=1e-12)
    assert perf.brier == pytest.approx(brier_score_loss(positive, proba[:, 1]), abs=1e-12)
    np.testing.assert_array_equal(perf.confusion, confusion_matrix(
        y, classes[np.argmax(proba, axis=1)], labels=classes))
    low, high = perf.roc_auc_interval
    assert low < perf.roc_auc < high


@needs_poppler
def test_pdf_has_the_sections(sample_review):
    _, files, _ = sample_review
    text = subprocess.run(["pdftotext", "-layout", str(files["pdf"]), "-"], capture_output=True,
                          text=True, check=True).stdout
    flat = " ".join(text.split())
    for section in ("Model review", "Summary", "Intake", "Anatomy", "Proximity", "Surrogate",
                    "Solver certificate", "The model's own performance", "ROC AUC",
                    "Faithfulness per group", "By age_years",
                    "Cases where the surrogate and the ensemble disagree",
                    "Limitations and cautions", "How to reproduce this review", "Sign-off",
                    "R. Okafor", "approved with conditions", "re-review after retraining"):
        assert section in flat, section
    review = sample_review[0]
    assert review.intake.model_sha256[:40] in flat.replace(" ", "") or \
        review.intake.model_sha256[:20] in flat
    assert "Fidelity is measured on the data given" in flat
    info = subprocess.run(["pdfinfo", str(files["pdf"])], capture_output=True, text=True,
                          check=True).stdout
    pages = int(next(line.split()[-1] for line in info.splitlines() if line.startswith("Pages")))
    assert 5 <= pages <= 30


@needs_poppler
def test_pdf_pages_render(sample_review, tmp_path):
    from PIL import Image

    _, files, _ = sample_review
    subprocess.run(["pdftoppm", "-r", "30", "-png", str(files["pdf"]), str(tmp_path / "p")],
                   check=True)
    pages = sorted(tmp_path.glob("p-*.png"))
    assert pages
    for page in pages:
        grey = np.asarray(Image.open(page).convert("L"), dtype=float)
        assert grey.std() > 3, page.name  # ink on every page


def test_manifest_records_what_reproduction_needs(sample_review):
    review, files, folder = sample_review
    manifest = json.loads(files["manifest"].read_text())
    import hashlib

    model_bytes = (folder / "model.skops").read_bytes()
    assert manifest["inputs"]["model"]["sha256"] == hashlib.sha256(model_bytes).hexdigest()
    assert manifest["inputs"]["data"]["sha256"] == \
        hashlib.sha256((folder / "data.csv").read_bytes()).hexdigest()
    assert manifest["settings"]["seed"] == 3 and manifest["seeds"]["surrogate"] == 3
    for lib in ("python", "grovewise", "numpy", "scikit-learn", "pyomo", "highspy", "HiGHS"):
        assert lib in manifest["versions"], lib
    assert set(manifest["digests"]) == set(review.results)
    assert manifest["certificate"]["status"] == review.surrogate.certificate["status"]
    assert manifest["report_files"]["pdf"]["sha256"] == \
        hashlib.sha256(files["pdf"].read_bytes()).hexdigest()


def test_reproduce_passes_then_fails_on_one_changed_byte(sample_review, capsys):
    _, files, folder = sample_review
    verdict = reproduce(files["manifest"])
    assert verdict.passed, verdict.text()
    data = folder / "data.csv"
    original = data.read_bytes()
    try:
        changed = bytearray(original)
        at = original.index(b"\n", 200) + 12  # a digit inside a data row
        changed[at] = ord("7") if changed[at] != ord("7") else ord("8")
        data.write_bytes(bytes(changed))
        verdict = reproduce(files["manifest"])
        assert not verdict.passed
        assert any(name == "data file" and not ok for name, ok, _ in verdict.checks)
        assert main(["reproduce", str(files["manifest"])]) == 1
        assert "NOT reproduced" in capsys.readouterr().out
    finally:
        data.write_bytes(original)


def test_reopened_review_gives_the_same_results(sample_review, tmp_path):
    from grovewise.report.manifest import digest

    review, _, _ = sample_review
    review.save(tmp_path / "saved")
    back = Review.open(tmp_path / "saved")
    for step, result in review.results.items():
        assert digest(back.results[step]) == digest(result), step
    X = review.case_rows()
    np.testing.assert_array_equal(back.surrogate.surrogate.predict(back.filled(X)),
                                  review.surrogate.surrogate.predict(review.filled(X)))
    assert back.reviewer == review.reviewer and back.settings == review.settings
    assert back.surrogate.surrogate.rules_ == review.surrogate.surrogate.rules_
    # The program HiGHS solved is kept too, and HiGHS reads it back.
    import highspy

    assert back.program_mps == review.program_mps
    path = back.write_program(tmp_path / "program.mps")
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    assert h.readModel(str(path)) == highspy.HighsStatus.kOk and h.getNumCol() > 0


def test_killed_write_leaves_the_previous_report(sample_review, tmp_path):
    """A report write killed midway (SIGKILL) leaves the report that was there intact."""
    review, files, _ = sample_review
    out = tmp_path / "out"
    out.mkdir()
    for name in ("report.pdf", "report.html"):
        shutil.copy(files[name.split(".")[1]], out / name)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    saved = tmp_path / "saved"
    review.save(saved)
    script = textwrap.dedent(f"""
        import os, signal, threading
        from grovewise.review import Review
        from grovewise.report import content, pdf_report
        review = Review.open({str(saved)!r})
        real = pdf_report.render_pdf
        def slow(doc, path):
            import matplotlib.backends.backend_pdf as b
            orig = b.PdfPages.savefig
            def savefig(self, *a, **k):
                orig(self, *a, **k)
                os.kill(os.getpid(), signal.SIGKILL)  # die after the first page
            b.PdfPages.savefig = savefig
            return real(doc, path)
        content.render_pdf = slow
        content.export_report(review, {str(out)!r}, formats=("pdf",))
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert proc.returncode == -signal.SIGKILL, proc.stderr[-2000:]
    after = {p.name: p.read_bytes() for p in out.iterdir() if not p.name.startswith(".")}
    assert after == before


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        self.text.append(data)


HOSTILE = ["<script>alert(1)</script>", 'dose "mg"', "a & b", "plain"]


def test_hostile_feature_names_are_escaped(tmp_path):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(300, 4)), columns=HOSTILE)
    frame["outcome"] = ((frame[HOSTILE[0]] + frame[HOSTILE[1]]) > 0).astype(int)
    model = RandomForestClassifier(20, max_depth=3, random_state=0).fit(frame[HOSTILE],
                                                                       frame["outcome"])
    sio.dump(model, tmp_path / "m.skops")
    frame.to_csv(tmp_path / "d.csv", index=False)
    review = Review(ReviewInputs(tmp_path / "m.skops", tmp_path / "d.csv", target="outcome"),
                    ReviewSettings(depth=1, time_limit=3.0, permutation_repeats=1,
                                   stability_resamples=0),
                    Reviewer(name="<b>Eve</b> & co", notes='"quoted" <i>'))
    review.run()
    files = export_report(review, tmp_path / "r", formats=("html",))
    html = files["html"].read_text()
    assert "<script>alert(1)</script>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<b>Eve</b>" not in html and "&lt;b&gt;Eve&lt;/b&gt; &amp; co" in html
    parser = _Collect()
    parser.feed(html)
    assert "script" not in parser.tags and "b" not in parser.tags
    assert any("<script>alert(1)</script>" in t for t in parser.text)


def test_review_command_line(tmp_path, capsys):
    paths = sample_paths()
    code = main(["review", str(paths["forest"]), str(paths["data"]), "--target", "complication",
                 "--out", str(tmp_path / "o"), "--time-limit", "4", "--depth", "1",
                 "--reviewer", "A. Lind", "--group", "smoker", "--stability-resamples", "2"])
    assert code == 0
    out = capsys.readouterr().out
    assert "surrogate (winning stage" in out and "report.pdf" in out
    assert "(95% interval" in out
    assert_certificate_line(out, "certificate   ", 1)
    assert "by group      By smoker, the surrogate's fidelity" in out
    assert "model         ROC AUC" in out
    assert "stability     The surrogate's root" in out and "of 2 bootstrap re-fits" in out
    assert (tmp_path / "o" / "manifest.json").is_file()
    reopened = Review.open(tmp_path / "o" / "review")
    assert reopened.reviewer.name == "A. Lind"
    assert reopened.settings.group_columns == ["smoker"]
    assert [g.name for g in reopened.surrogate.group_fidelity] == ["smoker"]
    bad = main(["review", str(paths["forest"]), str(paths["data"]), "--target", "nope",
                "--out", str(tmp_path / "p")])
    assert bad == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "nope" in err and "Traceback" not in err
    assert main(["review", str(paths["forest"]), str(paths["data"]), "--out", str(tmp_path / "q"),
                 "--depth", "9"]) == 2
    assert "depth" in capsys.readouterr().err


@pytest.mark.slow  # 80-150 s; tests/test_reproduce.py checks the same on the sample in CI
def test_node_limited_review_reproduces_exactly(tmp_path):
    """With a node limit (and time to spare) every digest, the surrogate's included, is equal."""
    from sklearn.datasets import load_breast_cancer  # Wolberg et al., UCI, bundled

    data = load_breast_cancer(as_frame=True)
    model = RandomForestClassifier(30, max_depth=4, random_state=0).fit(data.data, data.target)
    sio.dump(model, tmp_path / "bc.skops")
    data.frame.to_csv(tmp_path / "bc.csv", index=False)
    review = Review(ReviewInputs(tmp_path / "bc.skops", tmp_path / "bc.csv", target="target"),
                    ReviewSettings(depth=2, time_limit=120, node_limit=10, permutation_repeats=1,
                                   stability_resamples=2))
    review.run()
    files = export_report(review, tmp_path / "r", formats=("html",))
    manifest = json.loads(files["manifest"].read_text())
    assert manifest["deterministic"] is True
    verdict = reproduce(files["manifest"])
    assert verdict.passed, verdict.text()
    names = [name for name, _, _ in verdict.checks]
    assert "re-fit surrogate results" in names and "re-fit cases results" in names


def test_demo_window_failure_costs_a_message_not_the_review(tmp_path, capsys):
    """When the window cannot open, the demo says what to install and still succeeds."""
    from grovewise.cli import XCB_PACKAGES, _open_window_process

    assert _open_window_process(tmp_path / "no_review_here") == 0
    err = " ".join(capsys.readouterr().err.split())
    assert "could not open" in err and XCB_PACKAGES.split()[0] in err
