"""A results database of a simulated demo batch for the quality and engineer pages' tests.

Made by ``knobline demo`` (the real runner and store on the simulated bench), then a station-fault
run and an engineering run not for shipment added through the Store API, as a line would record
them. The batch's verdicts are whatever the simulation gives: tests count them from the store,
never from numbers written here.
"""

from __future__ import annotations

from pathlib import Path

from click.testing import CliRunner

from fixture.cli import main
from fixture.reporting.signing import station_key
from fixture.store import open_store

#: serials added to the demo batch by :func:`demo_database`
FAULTED_SERIAL = "PW22-FAULTED"
ENGINEERING_SERIAL = "PW22-ENGINEERING"


def demo_database(folder: Path, units: int = 12) -> str:
    """A demo batch of ``units`` in ``folder/results.sqlite`` plus a station-fault and a not-for-shipment run.

    The station key is made in ``folder/keys/station-key.pem``, where the web pages look beside a SQLite
    database (the layout ``knobline demo`` writes), so no test signs with the developer's own key.
    """
    station_key(folder / "keys" / "station-key.pem", create_missing=True)
    result = CliRunner().invoke(main, ["demo", "--units", str(units), "--out", str(folder), "--no-reports"],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.output
    url = f"sqlite:///{folder / 'results.sqlite'}"
    with open_store(url) as store:
        last = store.runs(limit=1)[0]
        for serial, verdict, engineering in ((FAULTED_SERIAL, "station-fault", False),
                                             (ENGINEERING_SERIAL, "pass", True)):
            run_id = store.begin_run(serial, {}, last.station, "operator", last.software_version,
                                     last.sequence_sha256, last.design_sha256, not_for_shipment=engineering)
            store.finish_run(run_id, verdict)
    return url
