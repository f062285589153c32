"""A results database holding text no input reader lets in: escape sequences, NUL, C1 and bidi controls.

The rows are written through the Store API with harmless text, then overwritten
with plain SQL, as a database filled by another tool or an older knobline would
hold them: the output side must cope whatever the input side refuses.
"""

from __future__ import annotations

import datetime as dt
import hashlib

from sqlalchemy import text

from fixture.store import MeasurementRecord, open_store

# ECMA-48 control sequences: ED 2 (erase the screen), CUP (cursor home), SGR 1;42 (bold on green), SGR 0.
FAKE_PASS = "\x1b[2J\x1b[H\x1b[1;42m PASS \x1b[0m"
# The serial repaints the screen, hides its tail behind a NUL and reverses the rest (U+202E, UAX #9).
SERIAL = f"PW22-{FAKE_PASS}\x00\u202e0001-XX"
OPERATOR = "ana\u2066\u200f"  # a left-to-right isolate and a right-to-left mark (UAX #9 section 2)
LOT = "C1-\x9b31m\x7f"  # C1 CSI (0x9B, ECMA-48 8-bit form) and DEL
STEP_NAME = "power\u202a up"
MESSAGE = "ok\x1b]0;owned\x07\r"  # OSC 0 sets the terminal's title, ended by BEL; then a carriage return
STATION = "line\x1b[8m-1"  # SGR 8: concealed text

RAW = ("\x1b", "\x00", "\u202e", "\u2066", "\u200f", "\x9b", "\x7f", "\u202a", "\x07", "\r")
"""Characters that must never reach a terminal or a page raw."""

VISIBLE_PASS = "\\x1b[2J\\x1b[H\\x1b[1;42m PASS \\x1b[0m"
"""How :data:`FAKE_PASS` is shown (the Python-style escapes ``visible`` writes)."""

DESIGN_SHA = hashlib.sha256(b"a design file").hexdigest()
SEQUENCE_SHA = hashlib.sha256(b"a sequence file").hexdigest()
T0 = dt.datetime(2026, 3, 2, 8, 0, tzinfo=dt.UTC)
CURRENT = MeasurementRecord("supply current", "supply_current", 6.6e-3, "A", "pass", acceptance_low=2e-3,
                            acceptance_high=15e-3, decision_rule="simple acceptance")


def hostile_database(url: str) -> int:
    """Fill ``url`` with one failed run of a unit whose texts are all hostile; returns the run id.

    The step fails too, so its name reaches the batch report's failing-step chart.
    """
    with open_store(url) as store:
        store.record_design("PW-22", "C", "demo-panel.toml", DESIGN_SHA)
        store.record_sequence("final test", "demo-sequence.toml", SEQUENCE_SHA)
        store.record_station("line-1", "hall 2", hashlib.sha256(b"a station").hexdigest(), "demo-station.toml")
        run_id = store.begin_run("PLACEHOLDER", {"c_integrator": "LOT-PLACEHOLDER"}, "line-1", "ana", "0.1.0",
                                 SEQUENCE_SHA, DESIGN_SHA, started_at=T0)
        store.record_step(run_id, 0, "power up", "fail", T0, T0 + dt.timedelta(seconds=1), "ok", [CURRENT])
        store.finish_run(run_id, "fail", ended_at=T0 + dt.timedelta(seconds=2))
        with store.engine.begin() as con:
            con.execute(text("UPDATE unit SET serial = :v WHERE serial = 'PLACEHOLDER'"), {"v": SERIAL})
            con.execute(text("UPDATE run SET operator = :v"), {"v": OPERATOR})
            con.execute(text("UPDATE component_lot SET lot_code = :v"), {"v": LOT})
            con.execute(text("UPDATE step_result SET name = :n, message = :m"), {"n": STEP_NAME, "m": MESSAGE})
            con.execute(text("UPDATE station SET name = :v"), {"v": STATION})
    return run_id


def raw_characters_in(output: str) -> list[str]:
    """The characters of :data:`RAW` that appear in ``output``."""
    return [repr(c) for c in RAW if c in output]
