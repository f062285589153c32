"""Words, not identifiers: what the certificate, ``knobline unit`` and the batch report print for people."""

from __future__ import annotations

import html
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.commands.unit import measurement_line
from fixture.files.design_file import load_design
from fixture.model.quantities import QUANTITIES
from fixture.reporting.certificate import build_record
from fixture.reporting.certificate_view import certificate_view
from fixture.reporting.formatting import NO_LIMITS
from fixture.reporting.part_labels import design_part_labels, labels_from_design
from fixture.model.step_terms import CHECK_QUANTITIES
from fixture.reporting.wording import quantity_label, time_words
from fixture.store import open_store

DEMO_DESIGN = Path("sequences/demo-panel.toml")
#: keys that must never reach a page a person reads (the issue names these)
KNOWN_KEYS = ("frequency_hz", "period_s", "duty_pct", "high_time_s", "supply_current_a", "c_integrator",
              "knob_a_pot", "knob_b_pot", "r_integrator", "duty_shift_pp", "frequency_shift_pct",
              "decode_error_a_pct", "decode_error_b_pct")
IDENTIFIER = re.compile(r"\b[A-Za-z]+_[A-Za-z0-9_]+\b")


def visible_text(page: str) -> str:
    """What a browser shows of ``page``: no style, no script elements, no tags, entities decoded."""
    page = re.sub(r"<(style|script)\b.*?</\1>", " ", page, flags=re.S)
    page = re.sub(r"<title>.*?</title>", " ", page, flags=re.S)
    return html.unescape(re.sub(r"<[^>]+>", " ", page))


def identifiers_in(text: str) -> list[str]:
    text = re.sub(r"\S*/\S*", " ", text)  # file paths and database URLs name files, not things
    return sorted(set(IDENTIFIER.findall(text)) | {k for k in KNOWN_KEYS if k in text})


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    result = CliRunner().invoke(main, ["demo", "--units", "3", "--out", str(out)], catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    (out / "demo-output.txt").write_text(result.stdout, encoding="utf-8")
    return out


def test_every_quantity_and_check_value_has_a_label_and_unknown_keys_become_words() -> None:
    for key in (*QUANTITIES, "supply_current_a", *CHECK_QUANTITIES):
        label = quantity_label(key)
        assert "_" not in label and label[0].isupper(), (key, label)
    assert quantity_label("decode_error_a_pct") == "Largest decode error, knob A"
    assert quantity_label("supply_voltage_v") == "Supply voltage"  # words from the key, unit suffix dropped


def test_every_part_of_the_demo_design_is_named_by_designator_and_role() -> None:
    design = load_design(DEMO_DESIGN)
    from_file = labels_from_design(design)
    from_text = design_part_labels(DEMO_DESIGN.read_text(encoding="utf-8"))  # as stored with the run
    for part in design.parts:
        for labels in (from_file, from_text):
            label = labels[part.key]
            assert label.designator == part.ref and label.label.startswith(part.ref + " "), label
            assert "_" not in label.label and part.key not in label.label, label
            if part.description:
                assert label.label.endswith(f"({part.description})"), label
    assert from_text["c_integrator"].label.startswith("C1 integrator capacitor")
    assert from_text["knob_a_pot"].label == f"RV1 knob A ({design.knobs['a'].label}) potentiometer"


def test_times_are_given_to_the_second_with_the_zone() -> None:
    # ISO 8601 date and time, seconds, the zone named (common practice, no source)
    assert time_words("2026-12-03T09:16:39.512345+00:00") == "2026-12-03 09:16:39 UTC"
    assert time_words("2026-12-03T10:16:39+01:00") == "2026-12-03 09:16:39 UTC"


def test_no_identifier_on_the_certificate_the_terminal_or_the_batch_report(demo: Path) -> None:
    certificates = sorted((demo / "certificates").glob("*.html"))
    assert certificates
    for path in certificates:
        text = visible_text(path.read_text(encoding="utf-8"))
        assert identifiers_in(text) == [], path.name
        assert "Step 1:" in text and "Step 0:" not in text
    batch = visible_text((demo / "batch-report.html").read_text(encoding="utf-8"))
    assert identifiers_in(batch) == []
    db = str(demo / "results.sqlite")
    with open_store(db) as store:
        serials = [r.serial for r in store.runs(limit=10)]
    for serial in serials:
        out = CliRunner().invoke(main, ["unit", serial, "--db", db], catch_exceptions=False).stdout
        # the database URL names a file path; the lines after the first are what is read
        assert identifiers_in(out) == [], serial
        assert "step 1 " in out and "step 0 " not in out
    # the demo's own summary and the yield table by lot are terminal pages too
    assert identifiers_in((demo / "demo-output.txt").read_text(encoding="utf-8")) == []
    by_lot = CliRunner().invoke(main, ["yield", "--by", "lot", "--db", db], catch_exceptions=False).stdout
    assert "C1 integrator capacitor" in by_lot and identifiers_in(by_lot) == []


def test_the_batch_report_sets_predicted_first_pass_beside_observed_per_step_in_words(demo: Path) -> None:
    page = visible_text((demo / "batch-report.html").read_text(encoding="utf-8"))
    section = page[page.index("Predicted against observed first-pass yield"):page.index("Failing steps")]
    # the demo sequence's two knob-matrix steps are predicted; the other steps are named with the reason
    assert "frequency at knob A stops" in section and "duty at knob B stops" in section
    assert "Not predicted: power up" in section
    assert any(v in section for v in ("consistent with the prediction", "lower than predicted",
                                      "higher than predicted", "no unit reached this step"))
    assert "exact binomial test p" in section
    assert identifiers_in(section) == []


def test_the_terminal_prints_each_reading_as_the_certificate_does(demo: Path) -> None:
    with open_store(str(demo / "results.sqlite")) as store:
        runs = store.runs(limit=10)
        for summary in runs:
            record = build_record(store, summary.run_id)
            view = certificate_view(record, {}, safety_caution="", issuer="test")
            detail = store.run(summary.run_id)
            for step, section in zip(sorted(detail.steps, key=lambda s: s.index), view.steps, strict=True):
                for m, row in zip(step.measurements, section.rows, strict=True):
                    line = measurement_line(m)
                    assert f": {row.reading}" in line, (line, row)
                    if row.uncertainty != "-":
                        assert f"U = {row.uncertainty} (k = 2)" in line
                    if row.acceptance != NO_LIMITS:
                        assert f"acceptance {row.acceptance}" in line
