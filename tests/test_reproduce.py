"""``grovewise reproduce`` checks what a review states, exactly, before it re-fits
(issue "A review that holds up when someone checks it", item 1)."""

from __future__ import annotations

import json
import re
import shutil

import pytest

from grovewise.batch import write_review_folder
from grovewise.cli import main
from grovewise.reproduce import reproduce
from grovewise.review import ReviewInputs, ReviewSettings
from grovewise.sample_data import sample_paths

SETTINGS = dict(depth=2, time_limit=60, node_limit=20, permutation_repeats=1,
                permutation_rows=500, exactness_rows=1000, proximity_rows=300, seed=1,
                stability_resamples=2)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The sample reviewed with a node limit (every stage stops on counts), folder written."""
    folder = tmp_path_factory.mktemp("reproduce")
    paths = sample_paths()
    model = shutil.copy(paths["forest"], folder / "model.skops")
    data = shutil.copy(paths["data"], folder / "data.csv")
    second = shutil.copy(paths["xgboost"], folder / "second.json")
    out = folder / "review_out"
    write_review_folder(ReviewInputs(model, data, target=paths["target"], second_model=second),
                        ReviewSettings(**SETTINGS), out)
    return out


def _copy(written, tmp_path):
    target = tmp_path / "copy"
    shutil.copytree(written.parent, target)
    return target / written.name


def test_an_untouched_review_reproduces_exactly(written):
    verdict = reproduce(written / "manifest.json")
    assert verdict.passed, verdict.text()
    names = [name for name, _, _ in verdict.checks]
    assert "report file report.html" in names and "report file report.pdf" in names
    assert any(n.startswith("saved review file review/arrays-") for n in names)
    assert "manifest.json figures against the saved review" in names
    assert "saved trees re-scored on the data" in names
    # node-limited: the re-fit gives the identical tree, not an approximately equal one
    assert ("re-fit surrogate results", True, "identical") in verdict.checks
    assert ("re-fit cases results", True, "identical") in verdict.checks
    assert ("re-fit stability results", True, "identical") in verdict.checks
    assert ("re-fit second_model results", True, "identical") in verdict.checks
    assert "stability figures counted again" in names
    assert "second model's agreement re-counted from its file" in names
    assert "second model file" in names


@pytest.mark.parametrize("key, path", [
    ("stability", ("surrogate", "pairwise_agreement")),
    ("stability", ("greedy", "fidelity", "max")),
    ("stability", ("surrogate", "handed_to_axis")),
    ("second_model", ("agreement",)),
    ("second_model", ("explains", "surrogate", "to_second")),
])
def test_a_changed_stability_or_second_model_figure_is_named(written, tmp_path, key, path):
    folder = _copy(written, tmp_path)
    manifest_path = folder / "manifest.json"
    manifest = json.loads(manifest_path.read_text())
    node = manifest[key]
    for part in path[:-1]:
        node = node[part]
    node[path[-1]] = round(node[path[-1]] + 0.0123, 4)
    manifest_path.write_text(json.dumps(manifest, indent=1))
    assert f"{key.replace('_', ' ')} figures stated differ" in _stated_check(manifest_path)


def _stated_check(manifest_path) -> str:
    """``reproduce`` (no re-fit) must fail; the detail of its check of the stated figures."""
    verdict = reproduce(manifest_path, refit=False)
    assert not verdict.passed
    return dict((n, d) for n, _, d in verdict.checks)["manifest.json figures against the "
                                                      "saved review"]


def test_a_changed_figure_in_the_manifest_is_named(written, tmp_path, capsys):
    folder = _copy(written, tmp_path)
    path = folder / "manifest.json"
    manifest = json.loads(path.read_text())
    stated = manifest["fidelity"]["surrogate"]["holdout"]
    manifest["fidelity"]["surrogate"]["holdout"] = round(stated + 0.0191, 4)
    path.write_text(json.dumps(manifest, indent=1))
    detail = _stated_check(path)
    assert f"surrogate holdout fidelity {round(stated + 0.0191, 4)!r} stated" in detail
    assert main(["reproduce", str(path)]) == 1
    assert "NOT reproduced" in capsys.readouterr().out


def test_a_changed_digit_in_the_report_is_named(written, tmp_path):
    folder = _copy(written, tmp_path)
    html = folder / "report.html"
    text = html.read_text(encoding="utf-8")
    match = re.search(r"\d+\.\d%", text)
    digit = match.group(0)
    changed = ("1" if digit[0] != "1" else "2") + digit[1:]
    html.write_text(text[:match.start()] + changed + text[match.end():], encoding="utf-8")
    verdict = reproduce(folder / "manifest.json", refit=False)
    assert verdict.failed() == ["report file report.html"]
    assert "was changed after the review" in verdict.text()


def test_a_changed_saved_result_is_named(written, tmp_path):
    folder = _copy(written, tmp_path)
    saved = folder / "review" / "review.json"
    doc = json.loads(saved.read_text())
    text = json.dumps(doc)
    # one stated fidelity inside the saved result, changed in its fourth decimal
    m = re.search(r'"holdout": (0\.\d{4})', text)
    new = m.group(1)[:-1] + ("1" if m.group(1)[-1] != "1" else "2")
    saved.write_text(text[:m.start(1)] + new + text[m.end(1):])
    verdict = reproduce(folder / "manifest.json", refit=False)
    assert "saved review file review/review.json" in verdict.failed()


def test_a_decision_from_the_command_line_is_recorded_and_checked(written, tmp_path, capsys):
    folder = _copy(written, tmp_path)
    assert main(["decide", str(folder), "--decision", "approve-with-conditions",
                 "--conditions", "re-review after retraining", "--reviewer", "R. Okafor",
                 "--note", "limits on leaf 2"]) == 0
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["reviewer"]["decision"] == "approve_with_conditions"
    assert manifest["reviewer"]["conditions"] == "re-review after retraining"
    assert manifest["reviewer"]["signed_at"]
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert "approved with conditions" in html and "re-review after retraining" in html
    # the new report and saved review are what the manifest now records
    verdict = reproduce(folder / "manifest.json", refit=False)
    assert verdict.passed, verdict.text()
    # conditions are required for that decision
    assert main(["decide", str(folder), "--decision", "approve-with-conditions",
                 "--conditions", " "]) == 2
    assert "conditions" in capsys.readouterr().err
    assert main(["decide", str(tmp_path / "nowhere"), "--decision", "reject"]) == 2


def test_a_signed_review_verifies_and_names_any_file_changed_after(written, tmp_path, capsys,
                                                                   monkeypatch):
    # Reference: cryptography's own Ed25519 verify over the payload rebuilt here.
    import base64

    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    monkeypatch.setenv("GROVEWISE_KEY", str(tmp_path / "keys" / "me.pem"))
    folder = _copy(written, tmp_path)
    assert main(["sign", str(folder)]) == 0
    assert "made a signing key" in capsys.readouterr().out
    record = json.loads((folder / "signature.json").read_text())
    assert {"manifest.json", "report.html", "report.pdf"} <= set(record["files"])
    assert any(n.startswith("review/") for n in record["files"])
    payload = json.dumps({k: record[k] for k in ("files", "format", "public_key", "signed_at")},
                         sort_keys=True, separators=(",", ":")).encode()
    Ed25519PublicKey.from_public_bytes(base64.b64decode(record["public_key"])).verify(
        base64.b64decode(record["signature"]), payload)  # raises if it does not hold
    assert main(["verify", str(folder)]) == 0
    verdict = reproduce(folder / "manifest.json", refit=False)
    assert verdict.passed and any(name == "signature" for name, _, _ in verdict.checks)
    # a decision would break the signature: refused unless signed again
    assert main(["decide", str(folder), "--decision", "reject"]) == 2
    assert "--sign" in capsys.readouterr().err
    assert main(["decide", str(folder), "--decision", "reject", "--sign"]) == 0
    assert main(["verify", str(folder)]) == 0
    # one byte of the PDF changed: the check fails and names the file
    pdf = folder / "report.pdf"
    raw = bytearray(pdf.read_bytes())
    raw[len(raw) // 2] ^= 1
    pdf.write_bytes(bytes(raw))
    capsys.readouterr()
    assert main(["verify", str(folder)]) == 1
    assert "report.pdf changed after signing" in capsys.readouterr().out
    verdict = reproduce(folder / "manifest.json", refit=False)
    assert ("signature", False) == next((n, ok) for n, ok, _ in verdict.checks if n == "signature")
