"""``knobline check`` takes a design, station or sequence file, and answers in JSON on a problem too."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from tests.json_keys import all_keys, documented_json_keys

ROOT = Path(__file__).resolve().parents[2]


def run(*args: str):
    return CliRunner().invoke(main, ["check", *args], catch_exceptions=False)


def test_a_station_file_given_as_the_file_is_checked_as_a_station() -> None:
    result = run(str(ROOT / "sequences" / "demo-station.toml"), "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["ok"] and data["station"]["roles"] and "parts" not in data


def test_a_sequence_file_given_as_the_file_is_checked_with_its_design() -> None:
    result = run(str(ROOT / "sequences" / "demo-sequence.toml"), "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["ok"] and data["sequence"]["design"].endswith("demo-panel.toml")


def test_problems_are_json_with_file_key_expected_found_and_exit_2(tmp_path: Path) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('[product]\nname = 1\n', encoding="utf-8")
    result = run(str(bad), "--json")
    assert result.exit_code == 2
    data = json.loads(result.stdout)
    assert data["ok"] is False
    first = data["problems"][0]
    assert (first["file"], first["key"], first["expected"]) == (str(bad), "product.name", "a non-empty string")
    assert first["message"].startswith(f"{bad}: product.name: expected")
    # every key the help documents, and no other, appears across a good and a bad answer
    good = json.loads(run(str(ROOT / "sequences" / "demo-panel.toml"), "--station", "demo-station",
                          "--sequence", "demo-sequence", "--json").stdout)
    # a sequence with a custom step from a module outside knobline and no pin for it: an unpinned note
    sequence = tmp_path / "custom.toml"
    sequence.write_text((ROOT / "sequences" / "demo-sequence.toml").read_text(encoding="utf-8").replace(
        'design = "demo-panel.toml"', f'design = "{ROOT / "sequences" / "demo-panel.toml"}"')
        + '\n[[steps]]\nkind = "custom"\nname = "volume"\ncall = "tests.runner.custom_steps:always"\n',
        encoding="utf-8")
    noted = json.loads(run(str(sequence), "--json").stdout)
    assert [n["reference"] for n in noted["unpinned"]] == ["tests.runner.custom_steps"]
    # with --db, the sequence's release and its sealed limits (README "Sealed limits")
    from fixture.store import open_store
    from tests.programs import DEMO_FILES, release_file

    url = f"sqlite:///{tmp_path / 'results.sqlite'}"
    with open_store(url) as store:
        release_file(store, "sequence", DEMO_FILES["sequence"], tmp_path / "people")
    released = json.loads(run("--sequence", "demo-sequence", "--db", url, "--json").stdout)
    assert released["sequence"]["release"]["limits"] == "as-sealed"
    documented = documented_json_keys(run("--help").stdout)
    knobs = set(good["stops"])  # stops is keyed by knob name (a, b), data rather than keys
    assert (all_keys(good) | all_keys(data) | all_keys(noted) | all_keys(released)) - knobs == documented
