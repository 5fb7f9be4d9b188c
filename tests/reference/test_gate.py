"""The data-quality gate on open data, and its CI-facing outputs.

Data: Palmer penguins (Gorman, Williams & Fraser 2014), as shipped by `palmerpenguins`: the four
body measurements. The reference is a sweep on half of the Adélie and Chinstrap birds, chosen
at random; the other half of the same species must pass the gate, and the Gentoo birds (a
species the reference never saw, much heavier with longer flippers) must fail it.

The JUnit XML is read with Python's standard `xml.etree.ElementTree`, and must hold one test
case per check; the Markdown must be a pipe table with one row per check.
"""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

COLUMNS = ["bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g"]


@pytest.fixture(scope="module")
def birds():
    import palmerpenguins

    df = palmerpenguins.load_penguins().dropna(subset=COLUMNS)
    rng = np.random.default_rng(7)
    known = df[df["species"] != "Gentoo"]
    mask = rng.random(len(known)) < 0.5
    return {
        "reference": known[mask][COLUMNS],
        "same": known[~mask][COLUMNS],
        "gentoo": df[df["species"] == "Gentoo"][COLUMNS],
    }


@pytest.fixture(scope="module")
def reference(birds, mixgauge_binary, tmp_path_factory):
    from conftest import Mixgauge

    work = tmp_path_factory.mktemp("gate")
    m = Mixgauge(mixgauge_binary, work)
    paths = {}
    for name, frame in birds.items():
        paths[name] = work / f"{name}.csv"
        frame.to_csv(paths[name], index=False)
    profile = work / "profile.json"
    m.run("sweep", paths["reference"], "--components", "1..4", "--standardise",
          "--profile", profile, "--out", work / "result.json")
    return m, paths, profile


def gate(m, batch, profile, fmt, expect):
    return m.run("gate", batch, "--reference", profile, "--format", fmt, expect=expect).stdout


def test_a_profile_keeps_the_recommended_model_in_data_units(reference):
    m, paths, profile = reference
    p = json.loads(profile.read_text())
    result = json.loads((profile.parent / "result.json").read_text())
    chosen = result["recommendations"]["heldout_one_se"]
    assert p["format"] == "mixgauge.profile/1"
    assert p["yardstick"] == "heldout"
    assert (p["model"]["covariance"], p["model"]["components"]) == (chosen["covariance"], chosen["components"])
    # The held-out mean in the profile is the result document's, in the data's own units.
    candidate = next(c for c in result["candidates"]
                     if (c["covariance"], c["components"]) == (chosen["covariance"], chosen["components"]))
    assert p["loglik"]["mean"] == pytest.approx(candidate["heldout"]["mean"], rel=1e-12)
    # Column summaries are the reference's own means and SDs (numpy, ddof=1).
    x = np.loadtxt(paths["reference"], delimiter=",", skiprows=1)
    for j, col in enumerate(p["columns"]):
        assert col["mean"] == pytest.approx(x[:, j].mean(), rel=1e-12)
        assert col["sd"] == pytest.approx(x[:, j].std(ddof=1), rel=1e-12)


def test_the_other_half_of_the_same_species_passes(reference):
    m, paths, profile = reference
    report = json.loads(gate(m, paths["same"], profile, "json", expect=0))
    assert report["verdict"] == "pass", report


def test_a_species_the_reference_never_saw_fails(reference):
    m, paths, profile = reference
    report = json.loads(gate(m, paths["gentoo"], profile, "json", expect=1))
    assert report["verdict"] == "fail"
    failed = {c["name"] for c in report["checks"] if c["verdict"] == "fail"}
    assert {"mean_loglik", "outlier_rate", "column_shift"} <= failed, report
    # Gentoo birds are heavier with longer flippers: those columns moved most.
    shift = next(c for c in report["checks"] if c["name"] == "column_shift")
    assert {shift["columns"][0]["name"], shift["columns"][1]["name"]} & {"flipper_length_mm", "body_mass_g"}


def test_junit_parses_with_one_case_per_check(reference):
    m, paths, profile = reference
    xml = gate(m, paths["gentoo"], profile, "junit", expect=1)
    root = ET.fromstring(xml)
    cases = root.findall(".//testcase")
    assert [c.get("name") for c in cases] == ["mean_loglik", "outlier_rate", "column_shift"]
    assert all(c.find("failure") is not None for c in cases)
    suite = root.find("testsuite")
    assert suite.get("tests") == "3" and suite.get("failures") == "3"
    passing = ET.fromstring(gate(m, paths["same"], profile, "junit", expect=0))
    assert not passing.findall(".//failure")


def test_markdown_is_a_table_with_a_row_per_check(reference):
    m, paths, profile = reference
    md = gate(m, paths["same"], profile, "markdown", expect=0)
    rows = [line for line in md.splitlines() if line.startswith("|")]
    assert len(rows) == 2 + 3
    assert set(rows[1].replace("|", "").replace(":", "")) == {"-"}, rows[1]
    widths = {line.replace("\\|", "").count("|") for line in rows}
    assert len(widths) == 1, rows


def test_a_batch_without_the_reference_columns_is_a_usage_error(reference):
    m, paths, profile = reference
    bad = profile.parent / "no-mass.csv"
    bad.write_text("bill_length_mm,bill_depth_mm,flipper_length_mm\n40,18,190\n41,17,192\n")
    err = m.run("gate", bad, "--reference", profile, expect=2).stderr
    assert "body_mass_g" in err, err
