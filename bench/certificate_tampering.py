"""How many tamperings of an HTML certificate `knobline verify` catches, with and without the database.

    python bench/certificate_tampering.py [--units N]

Makes a small demo batch, then edits copies of a pass and a fail certificate the
way a forger with a text editor would: the visible words and numbers (verdict,
a reading, serial, start time, product, lot, station, operator, instrument,
calibration date, decision rule, a step verdict), hidden elements and styles, a
record and seal pasted from another unit, the genuine record kept in a comment,
a file saved under another run's certificate name, the record or the signature
edited. Each is run through `knobline verify` (exit 1 = caught) with `--db`
and, where the check does not need the database, with `--no-db`. Prints one
line per tampering and the totals.
"""

from __future__ import annotations

import argparse
import glob
import json
import re
import shutil
import sys
import tempfile
from collections.abc import Callable
from pathlib import Path

from click.testing import CliRunner

# Measure this checkout, not whatever knobline happens to be installed.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from fixture.cli import main as cli  # noqa: E402

_DATA = '<script type="application/json"'


def _split(html: str) -> tuple[str, str]:
    # What a reader sees is the part before the embedded JSON; edits of the visible text stay there.
    at = html.index(_DATA)
    return html[:at], html[at:]


def _replace_text(html: str, old: str, new: str, count: int = 1) -> str:
    """Replace ``old`` in the visible text nodes only (never inside a tag or the embedded JSON)."""
    visible, rest = _split(html)
    done = 0

    def swap(m: re.Match[str]) -> str:
        nonlocal done
        text = m.group(1)
        if done < count and old in text:
            done += 1
            return ">" + text.replace(old, new, 1) + "<"
        return m.group(0)

    edited = re.sub(r">([^<>]*)<", swap, visible)
    if done == 0:
        raise LookupError(f"{old!r} is not in the visible text")
    return edited + rest


def _nth_number_text(html: str, unit_pattern: str, n: int) -> str:
    """Change the last digit of the n-th visible text node holding a number with ``unit_pattern``."""
    visible, rest = _split(html)
    nodes = [m for m in re.finditer(r">([^<>]*\d\s*" + unit_pattern + r"[^<>]*)<", visible)]
    if len(nodes) <= n:
        raise LookupError(f"fewer than {n + 1} visible numbers with {unit_pattern!r}")
    m = nodes[n]
    text = m.group(1)
    digits = [i for i, c in enumerate(text) if c.isdigit()]
    i = digits[-1]
    text = text[:i] + str((int(text[i]) + 3) % 10) + text[i + 1:]
    return visible[:m.start(1)] + text + visible[m.end(1):] + rest


def _json_blocks(html: str) -> list[re.Match[str]]:
    return list(re.finditer(r'<script type="application/json" id="([^"]+)">(.*?)</script>', html, re.S))


def _edit_seal_signature(html: str) -> str:
    for m in _json_blocks(html):
        data = json.loads(m.group(2))
        if isinstance(data, dict) and "signature" in data:
            sig = data["signature"]
            data["signature"] = ("0" if sig[0] != "0" else "1") + sig[1:]
            return html[:m.start(2)] + json.dumps(data) + html[m.end(2):]
    raise LookupError("no seal")


def _edit_seal_hash(html: str) -> str:
    for m in _json_blocks(html):
        data = json.loads(m.group(2))
        if isinstance(data, dict) and "record_sha256" in data:
            digest = data["record_sha256"]
            data["record_sha256"] = ("0" if digest[0] != "0" else "1") + digest[1:]
            return html[:m.start(2)] + json.dumps(data) + html[m.end(2):]
    raise LookupError("no seal")


def _second_record_in_template(html: str) -> str:
    # A second copy of the record, inert in a <template> a browser never shows.
    record = next(m.group(0) for m in _json_blocks(html) if "record" in m.group(1))
    return html.replace("</body>", f"<template>{record}</template>\n</body>", 1)


def _edit_record(html: str) -> str:
    for m in _json_blocks(html):
        data = json.loads(m.group(2))
        if isinstance(data, dict) and "unit" in data:
            data["unit"]["serial"] = data["unit"]["serial"] + "X"
            return html[:m.start(2)] + json.dumps(data) + html[m.end(2):]
    raise LookupError("no record")


def _paste_other(html: str, other: str) -> str:
    # Another unit's genuine record and seal in place of this one's, visible text untouched.
    blocks, others = _json_blocks(html), _json_blocks(other)
    out = html
    for m in reversed(blocks):
        twin = next(o for o in others if o.group(1) == m.group(1))
        out = out[:m.start()] + twin.group(0) + out[m.end():]
    return out


def _genuine_in_comment(html: str, other: str) -> str:
    # The file shows and embeds another unit's certificate; the genuine record sits in a comment.
    blocks = "".join(m.group(0) for m in _json_blocks(html))
    return other.replace("</body>", f"<!-- {blocks} -->\n</body>", 1)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=8)
    args = parser.parse_args()
    runner = CliRunner()
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "demo"
        result = runner.invoke(cli, ["demo", "--units", str(args.units), "--out", str(out), "--seed", "3"])
        if result.exit_code != 0:
            raise SystemExit(f"demo failed: {result.output}")
        db = str(out / "results.sqlite")
        certs = sorted(glob.glob(str(out / "certificates" / "*.html")))
        texts = {c: Path(c).read_text(encoding="utf-8") for c in certs}
        fail = next((c for c in certs if 'FAIL' in _split(texts[c])[0]), None)
        good = next(c for c in certs if c != fail)
        other = next(c for c in certs if c not in (fail, good))
        genuine = texts[good]
        serial = re.search(r'"serial":\s*"([^"]+)"', _split(genuine)[1]).group(1)  # type: ignore[union-attr]
        record = json.loads(next(m.group(2) for m in _json_blocks(genuine) if '"unit"' in m.group(2)))
        lot_code = next(iter(record["unit"]["lots"].values())) if isinstance(record["unit"]["lots"], dict) \
            else record["unit"]["lots"][0]["lot"]
        inst = record["instruments"][0]
        due = next((i["calibration_due"] for i in record["instruments"] if i["calibration_due"]), "none")
        cases: list[tuple[str, str, Callable[[], str], bool]] = [
            ("visible verdict FAIL -> PASS", fail or good, lambda: _replace_text(texts[fail], "FAIL", "PASS")
             if fail else _replace_text(genuine, "PASS", "FAIL"), True),
            ("a reading", good, lambda: _nth_number_text(genuine, "Hz", 0), True),
            ("the serial", good, lambda: _replace_text(genuine, serial, serial[:-1] + "9", count=99), True),
            ("the start time", good, lambda: _nth_number_text(genuine, r"(UTC|\+00:00)", 0), True),
            ("product name", good, lambda: _replace_text(genuine, record["unit"]["product"][:6], "PX-99 "), True),
            ("a component lot", good, lambda: _replace_text(genuine, lot_code, lot_code[:-1] + "Z"), True),
            ("station", good, lambda: _replace_text(genuine, record["run"]["station"], "Bench 9"), True),
            ("operator", good, lambda: _replace_text(genuine, record["run"]["operator"], "someone"), True),
            ("instrument serial", good, lambda: _replace_text(genuine, inst["serial"], inst["serial"] + "7"), True),
            ("calibration due date", good, lambda: _replace_text(genuine, due, due[:3] + str((int(due[3]) + 1) % 10)),
             True),
            ("a limit or U (a number in ms)", good, lambda: _nth_number_text(genuine, "ms", 1), True),
            ("a duty reading or limit (%)", good, lambda: _nth_number_text(genuine, "%", 3), True),
            ("decision rule text", good, lambda: _replace_text(genuine, "ILAC", "ILAK"), True),
            ("a step verdict", good, lambda: _replace_text(genuine, "PASS", "FAIL", count=2), True),
            ("a style hiding text", good, lambda: genuine.replace("</head>", "<style>table{display:none}</style>"
                                                                  "</head>", 1), True),
            ("an added element", good, lambda: genuine.replace("<body>", "<body><p>Approved by QA</p>", 1), True),
            ("another unit's record and seal pasted in", good, lambda: _paste_other(genuine, texts[other]), True),
            ("genuine record kept in a comment", good, lambda: _genuine_in_comment(genuine, texts[other]), True),
            ("record edited", good, lambda: _edit_record(genuine), True),
            ("signature edited", good, lambda: _edit_seal_signature(genuine), True),
            ("sealed record hash edited", good, lambda: _edit_seal_hash(genuine), True),
            ("a second record in a <template>", good, lambda: _second_record_in_template(genuine), True),
        ]
        key_files = [p for p in glob.glob(str(out / "keys" / "*.pem")) if ".pub." not in p and ".crt." not in p]
        key_opt = ["--key", key_files[0]] if key_files else []
        caught = {"--db": 0, "--no-db": 0}
        total = 0
        work = Path(tmp) / "tampered"
        work.mkdir()
        if (out / "certificates" / "public-keys").is_dir():
            shutil.copytree(out / "certificates" / "public-keys", work / "public-keys")
        print(f"{'tampering':<44} {'--db':>8} {'--no-db':>8}")
        for name, source, edit, _ in cases:
            try:
                text = edit()
            except LookupError as exc:
                print(f"{name:<44} not applicable ({exc})")
                continue
            target = work / Path(source).name
            target.write_text(text, encoding="utf-8")
            row = []
            for mode in ("--db", "--no-db"):
                cmd = ["verify", str(target), *key_opt] + (["--db", db] if mode == "--db" else ["--no-db"])
                code = runner.invoke(cli, cmd).exit_code
                detected = code == 1
                caught[mode] += detected
                row.append("caught" if detected else f"MISSED({code})")
            total += 1
            print(f"{name:<44} {row[0]:>8} {row[1]:>8}")
        # A file saved under run 2's certificate name that holds run 1.
        names = sorted(Path(c).name for c in certs)
        swap_dir = Path(tmp) / "swapped"
        shutil.copytree(out / "certificates", swap_dir)
        run1, run2 = names[0], names[1]
        (swap_dir / run2).write_text((swap_dir / run1).read_text(encoding="utf-8"), encoding="utf-8")
        code = runner.invoke(cli, ["verify", "2", "--dir", str(swap_dir), "--db", db, *key_opt]).exit_code
        total += 1
        caught["--db"] += code == 1
        print(f"{'verify 2 --dir D on a file holding run 1':<44} {'caught' if code == 1 else f'MISSED({code})':>8}")
        # The untouched file checked against another key: must fail, in one line.
        from fixture.reporting.signing import station_key  # noqa: PLC0415 (after the path is set)

        rogue = station_key(Path(tmp) / "rogue" / "station-key.pem", create_missing=True)
        wrong = runner.invoke(cli, ["verify", good, "--db", db, "--key", str(rogue.path)])
        total += 1
        caught["--db"] += wrong.exit_code == 1
        lines = [ln for ln in wrong.output.splitlines() if ln.startswith("  mismatch")]
        print(f"{'checked against the wrong key':<44} {'caught' if wrong.exit_code == 1 else 'MISSED':>8}  "
              f"({len(lines)} line: {lines[0].strip() if lines else ''})")
        untouched = runner.invoke(cli, ["verify", good, "--db", db, *key_opt]).exit_code
        print(f"untouched certificate verifies: {'yes' if untouched == 0 else f'NO (exit {untouched})'}")
        print(f"caught with --db: {caught['--db']} of {total}; with --no-db: {caught['--no-db']} of {total - 2}")


if __name__ == "__main__":
    main()
