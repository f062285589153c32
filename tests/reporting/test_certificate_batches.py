"""``knobline certificate`` for several runs: worker processes, ``--all``, and what is said when one fails."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from fixture.cli import main
from fixture.commands import _issuing
from fixture.commands._issuing import IssueOrder, Issuer
from fixture.store import open_store


def certificate(db_url: str, key, out: Path, *args: str):
    return CliRunner().invoke(main, ["certificate", *args, "--db", db_url, "--key", str(key.path),
                                     "--out", str(out), "--json"], catch_exceptions=False)


def files_in(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_worker_processes_write_the_same_bytes_as_one_process(db_url, key, tmp_path):
    # RFC 6979 signatures are deterministic (RFC 6979 section 3.2): the same record and key give the
    # same certificate whichever process wrote it, so parallel issuing cannot change what is signed.
    alone = certificate(db_url, key, tmp_path / "alone", "run:1", "run:2", "--jobs", "1")
    pooled = certificate(db_url, key, tmp_path / "pooled", "run:1", "run:2", "--jobs", "2", "--pdf")
    assert alone.exit_code == 0 and pooled.exit_code == 0, alone.stderr + pooled.stderr
    assert [c["run_id"] for c in json.loads(pooled.stdout)["certificates"]] == [1, 2]
    html_alone = files_in(tmp_path / "alone")
    html_pooled = {k: v for k, v in files_in(tmp_path / "pooled").items() if not k.endswith(".pdf")}
    assert html_alone == html_pooled and len(html_alone) == 3  # two certificates and the public key
    assert len([k for k in files_in(tmp_path / "pooled") if k.endswith(".pdf")]) == 2


def test_all_issues_each_judged_units_latest_run_and_skips_a_running_one(db_url, key, tmp_path):
    result = certificate(db_url, key, tmp_path / "out", "--all", "--jobs", "2")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert [(c["run_id"], c["verdict"]) for c in data["certificates"]] == [(1, "fail"), (2, "pass")]
    assert data["not_written"] == []


@pytest.mark.parametrize("args, message", [
    ((), "expected SERIAL or RUN arguments or --all, found neither"),
    (("run:1", "--all"), "expected SERIAL or RUN arguments or --all, found both"),
    (("run:1", "run:3"), "run 3: expected a run ended with a verdict on the unit (pass or fail), found running"),
])
def test_a_bad_reference_among_several_writes_nothing_and_exits_2(db_url, key, tmp_path, args, message):
    result = certificate(db_url, key, tmp_path / "out", *args)
    assert result.exit_code == 2
    assert result.stderr.splitlines()[-1] == f"knobline: error: {message}"
    assert not (tmp_path / "out").exists()


def test_a_certificate_that_cannot_be_written_is_named_the_others_written_and_exit_3(
        db_url, key, tmp_path, monkeypatch):
    real = _issuing.write_certificate

    def disk_full_for_run_1(store, run_id, *args, **kwargs):
        if run_id == 1:
            raise OSError(28, "No space left on device")
        return real(store, run_id, *args, **kwargs)

    monkeypatch.setattr(_issuing, "write_certificate", disk_full_for_run_1)
    result = certificate(db_url, key, tmp_path / "out", "run:1", "run:2", "--jobs", "1")
    assert result.exit_code == 3  # a station fault, never a statement about the unit
    data = json.loads(result.stdout)
    assert [c["run_id"] for c in data["certificates"]] == [2]
    assert data["not_written"] == [{"run_id": 1, "reason": "OSError: [Errno 28] No space left on device"}]
    assert result.stderr.splitlines()[-1] == ("knobline: station fault: run 1: certificate not written: "
                                              "OSError: [Errno 28] No space left on device")


def test_an_issuer_with_workers_reports_a_run_without_a_verdict_and_goes_on(db_url, key, tmp_path):
    order = IssueOrder(database=db_url, key_path=key.path, out_dir=tmp_path / "out")
    with Issuer(order, workers=2) as issuer:
        for run_id in (3, 1):
            issuer.submit(run_id)
        outcomes = issuer.finish()
    assert [o.run_id for o in outcomes] == [3, 1]
    assert outcomes[0].files is None and outcomes[0].fault is None
    assert outcomes[0].refused == ("run 3: expected a run ended with a verdict on the unit (pass or fail), "
                                   "found running")
    assert outcomes[1].files is not None and outcomes[1].files.html.exists()


def test_an_issuer_without_workers_needs_the_callers_store(db_url, key, tmp_path):
    order = IssueOrder(database=db_url, key_path=key.path, out_dir=tmp_path / "out")
    with pytest.raises(ValueError, match="expected its store"):
        Issuer(order, workers=0)
    with open_store(db_url) as store, Issuer(order, workers=0, store=store) as issuer:
        issuer.submit(2)
        assert issuer.done_count() == 1  # written at submit, in this process
        assert issuer.finish()[0].files is not None
