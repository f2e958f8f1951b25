"""``grovewise batch``: reading and checking batch files, a batch on a 2-worker local cluster
(good and bad lines side by side), and a worker killed in the middle of a batch."""

from __future__ import annotations

import json
import os
import signal
from html.parser import HTMLParser
from pathlib import Path

import pytest

from grovewise.batch import (ERROR_FILE, BatchFileError, read_batch, run_batch, run_line,
                             settings_readers)
from grovewise.cli import main
from grovewise.executor import Executor
from grovewise.review import ReviewSettings
from grovewise.sample_data import sample_paths

TINY = {"depth": 1, "time_limit": 2, "permutation_repeats": 1,
        "stability_resamples": 2}  # a review in ~10 s


@pytest.fixture(scope="module")
def sample():
    return sample_paths()


def _csv(path: Path, header: list[str], rows: list[list]) -> Path:
    lines = [",".join(header)] + [",".join(str(c) for c in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _good_row(sample, name: str) -> list:
    return [name, sample["forest"], sample["data"], sample["target"], *TINY.values()]


HEADER = ["name", "model", "data", "target", *TINY]


class _Links(HTMLParser):
    """The links and the text of a page, read with the standard library's HTML parser."""

    def __init__(self) -> None:
        super().__init__()
        self.links: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "a":
            self.links.append(dict(attrs)["href"])

    def handle_data(self, data):
        self.text.append(data)


def test_batch_settings_are_the_review_settings():
    names = set(ReviewSettings.__dataclass_fields__)
    asked = {"depth", "max_features_per_split", "alpha", "proximity_threshold", "time_limit",
             "node_limit", "holdout_share", "seed", "permutation_repeats"}
    assert asked <= set(settings_readers()) == names - {"flags"}


def test_a_line_may_name_a_second_model(tmp_path, sample):
    """The column second_model reaches the review's inputs; a missing file is the line's own
    problem, named as the command line names it."""
    batch = _csv(tmp_path / "b.csv", ["model", "data", "second_model"], [
        [sample["forest"], sample["data"], sample["xgboost"]],
        [sample["forest"], sample["data"], "nowhere.json"]])
    good, bad = read_batch(batch)
    assert good.problem is None and good.inputs().second_model == sample["xgboost"]
    assert "the second model file" in bad.problem and "nowhere.json" in bad.problem


def test_toml_batch_read_names_and_relative_paths(tmp_path, sample):
    rel = os.path.relpath(sample["forest"], tmp_path)
    batch = tmp_path / "reviews.toml"
    batch.write_text(f"""
[[review]]
model = "{rel}"
data = "{sample['data']}"
target = "complication"
depth = 1
time-limit = 2.5

[[review]]
model = "{rel}"
data = "{sample['data']}"
node_limit = "none"

[[review]]
name = "../escape"
model = "{rel}"
data = "{sample['data']}"

[[review]]
model = "{rel}"
data = "{sample['data']}"
colour = "green"
""", encoding="utf-8")
    lines = read_batch(batch)
    assert [ln.name for ln in lines] == ["clinic_forest", "clinic_forest-2", "clinic_forest-3",
                                         "clinic_forest-4"]
    first = lines[0]
    assert first.problem is None and first.model == Path(sample["forest"]).absolute()
    assert first.settings == {"depth": 1, "time_limit": 2.5}
    assert lines[1].problem is None and lines[1].settings == {"node_limit": None}
    assert "review 3" in lines[2].problem and "cannot name a folder" in lines[2].problem
    assert "review 4" in lines[3].problem and "unknown column colour" in lines[3].problem


def test_bad_batch_files_stop_with_exit_2(tmp_path, sample, capsys):
    no_data = _csv(tmp_path / "a.csv", ["model", "target"], [[sample["forest"], "x"]])
    assert main(["batch", str(no_data), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "a.csv, line 1" in err and "data" in err
    toml = tmp_path / "b.toml"
    toml.write_text('[settings]\ndepth = 2\n', encoding="utf-8")
    with pytest.raises(BatchFileError, match="b.toml"):
        read_batch(toml)
    assert main(["batch", str(tmp_path / "missing.csv"), "--out", str(tmp_path / "o")]) == 2
    good = _csv(tmp_path / "c.csv", HEADER, [_good_row(sample, "one")])
    capsys.readouterr()
    assert main(["batch", str(good), "--out", str(tmp_path / "o"), "--jobs", "-2"]) == 2
    assert "--jobs -2" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_command_with_only_bad_lines(tmp_path, sample, capsys):
    batch = _csv(tmp_path / "bad.csv", HEADER, [
        ["x", sample["forest"], tmp_path / "none.csv", sample["target"], *TINY.values()],
        ["y", sample["forest"], sample["data"], sample["target"], 1, "soon", 1]])
    assert main(["batch", str(batch), "--out", str(tmp_path / "out"), "--jobs", "1"]) == 1
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("[batch] 1/2 failed: x (0.0 s): ") and "none.csv" in out[0]
    assert out[1].startswith("[batch] 2/2 failed: y") and "time_limit 'soon'" in out[1]
    assert out[2].startswith("batch: 0 of 2 reviews done, 2 failed")
    assert (tmp_path / "out" / "y" / ERROR_FILE).read_text().startswith(f"{batch}, line 3")


def test_a_finished_line_is_not_run_twice(tmp_path, sample):
    batch = _csv(tmp_path / "b.csv", HEADER, [_good_row(sample, "one")])
    line = read_batch(batch)[0]
    line.data = tmp_path / "gone.csv"  # fails fast inside the review, as a worker would see it
    first = run_line(line, str(tmp_path), "run-1")
    error = tmp_path / "one" / ERROR_FILE
    assert first.verdict == "failed" and "gone.csv" in first.message
    os.utime(error, ns=(0, 0))  # marks the file: a second run would write it anew
    again = run_line(line, str(tmp_path), "run-1")  # the same batch: the record answers
    assert again == first and error.stat().st_mtime_ns == 0
    run_line(line, str(tmp_path), "run-2")  # another batch runs the line again
    assert error.stat().st_mtime_ns != 0


def test_batch_on_two_workers(tmp_path, sample):
    batch = _csv(tmp_path / "batch.csv", HEADER, [
        _good_row(sample, "good"),
        ["no-data", sample["forest"], "missing/patients.csv", sample["target"], *TINY.values()],
        ["bad-depth", sample["forest"], sample["data"], sample["target"], 7, 2, 1]])
    out = tmp_path / "out"
    seen = []
    with Executor(jobs=2, processes=True) as executor:
        result = run_batch(batch, out, executor=executor,
                           on_line=lambda k, n, o: seen.append((k, n, o.name, o.verdict)))
        assert executor.description == "local cluster, 2 workers (processes)"
    assert [o.verdict for o in result.outcomes] == ["done", "failed", "failed"]
    assert sorted(seen) == [(1, 3, "no-data", "failed"), (2, 3, "bad-depth", "failed"),
                            (3, 3, "good", "done")]
    # two error files, one review folder written as `grovewise review --out` writes it
    assert sorted(p.parent.name for p in out.glob(f"*/{ERROR_FILE}")) == ["bad-depth", "no-data"]
    assert "missing/patients.csv" in (out / "no-data" / ERROR_FILE).read_text()
    assert "depth=7" in (out / "bad-depth" / ERROR_FILE).read_text()
    good = out / "good"
    written = {p.name for p in good.iterdir()}
    assert {"report.html", "report.pdf", "manifest.json", "review"} <= written
    assert (good / "report.pdf").read_bytes()[:5] == b"%PDF-"  # ISO 32000-1, 7.5.2 file header
    manifest = json.loads((good / "manifest.json").read_text())
    assert manifest["inputs"]["model"]["sha256"]
    # the index: every line with its verdict, and links to the good review's report
    index = json.loads((out / "index.json").read_text())
    assert [(r["name"], r["verdict"]) for r in index["reviews"]] == [
        ("good", "done"), ("no-data", "failed"), ("bad-depth", "failed")]
    row = index["reviews"][0]
    assert row["report_html"] == "good/report.html" and row["report_pdf"] == "good/report.pdf"
    assert 0.5 < row["surrogate_holdout_fidelity"] <= 1 and row["certificate_status"]
    page = _Links()
    page.feed((out / "index.html").read_text(encoding="utf-8"))
    text = " ".join(page.text)
    assert {"good/report.html", "good/report.pdf", "no-data/error.txt"} <= set(page.links)
    assert all(name in text for name in ("good", "no-data", "bad-depth", "failed", "done"))
    assert not (out / ".grovewise-batch").exists()


@pytest.mark.slow  # about 50 s: run on purpose with `pytest -m slow`
def test_a_killed_worker_loses_no_finished_review(tmp_path, sample):
    names = ["first", "second", "third"]
    batch = _csv(tmp_path / "batch.csv", HEADER, [_good_row(sample, n) for n in names])
    out = tmp_path / "out"
    killed: dict = {}

    with Executor(jobs=2, processes=True) as executor:
        def on_line(count, total, outcome):
            if killed or outcome.verdict != "done":
                return
            killed["finished"] = outcome.name
            killed["stamp"] = (out / outcome.name / "manifest.json").stat().st_mtime_ns
            client = executor.client
            pids = client.run(os.getpid)
            busy = [addr for addr, keys in client.processing().items() if keys]
            killed["pid"] = pids[busy[0]]
            os.kill(killed["pid"], signal.SIGKILL)

        result = run_batch(batch, out, executor=executor, on_line=on_line)
        after = set(executor.client.run(os.getpid).values())
    assert killed["pid"] not in after  # the worker was really killed (and replaced)
    assert [o.verdict for o in result.outcomes] == ["done"] * 3
    for name in names:
        assert (out / name / "report.html").is_file() and (out / name / "manifest.json").is_file()
    # the review that had finished before the kill was not run again
    assert (out / killed["finished"] / "manifest.json").stat().st_mtime_ns == killed["stamp"]
