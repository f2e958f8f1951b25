"""`grovewise surrogate`: fits, prints the rules and the certificate, exports every form."""

import json

import highspy

from certificate_lines import assert_certificate_line
from grovewise.cli import main
from grovewise.sample_data import sample_paths


def test_surrogate_command_exports_rules_json_tree_and_program(tmp_path, capfd):
    paths = sample_paths()
    out = tmp_path / "s"
    code = main(["surrogate", str(paths["xgboost"]), str(paths["data"]), "--target",
                 "complication", "--out", str(out), "--depth", "2", "--time-limit", "6"])
    assert code == 0
    printed = capfd.readouterr().out
    assert "Running HiGHS" not in printed  # the solver's banner stays out of our output
    assert "surrogate (winning stage" in printed
    assert_certificate_line(printed, "certificate: ", 2)
    assert "exact axis-aligned tree: fidelity (unweighted)" in printed
    assert "(95% interval" in printed
    for name in ("rules.txt", "surrogate.json", "tree.png", "tree.svg", "program.mps"):
        assert (out / name).stat().st_size > 0, name
    doc = json.loads((out / "surrogate.json").read_text())
    rules = (out / "rules.txt").read_text()
    assert doc["rules"] in rules
    assert doc["fidelity"]["surrogate"]["train"] >= 0.8
    # HiGHS itself reads the exported program back.
    h = highspy.Highs()
    h.setOptionValue("output_flag", False)
    assert h.readModel(str(out / "program.mps")) == highspy.HighsStatus.kOk
    assert h.getNumCol() > 0 and h.getNumRow() > 0


def test_surrogate_command_bad_setting(tmp_path, capsys):
    paths = sample_paths()
    code = main(["surrogate", str(paths["forest"]), str(paths["data"]), "--out", str(tmp_path),
                 "--proximity-threshold", "1.5"])
    assert code == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "proximity_threshold" in err and "Traceback" not in err

