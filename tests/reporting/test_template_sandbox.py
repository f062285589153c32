"""Report templates are sandboxed: no code execution, no file access, no key, one-line errors, nothing written."""

from __future__ import annotations

import base64
import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from cryptography.hazmat.primitives import serialization

from fixture.cli import main
from fixture.commands.certificate import write_certificate
from fixture.commands.verify import read_certificate_file, verify_certificate
from fixture.errors import SoftwareFault, UserInputError
from fixture.reporting.signing import StationKey
from fixture.reporting.templating import make_environment, plain_data, render_template
from fixture.store import open_store

UNSAFE = "the template tried an unsafe operation"


def company_folder(tmp_path: Path, body: str, name: str = "certificate.html.j2") -> Path:
    folder = tmp_path / "company"
    folder.mkdir(exist_ok=True)
    (folder / name).write_text(body, encoding="utf-8")
    return folder


def write(db_url: str, run_id: int, out: Path, key: StationKey, **options):
    with open_store(db_url) as store:
        return write_certificate(store, run_id, out, key, **options)


def refusal(db_url: str, key: StationKey, tmp_path: Path, body: str) -> str:
    """The error message of rendering a certificate with template ``body``; nothing may be written."""
    out = tmp_path / "out"
    with pytest.raises(UserInputError) as caught:
        write(db_url, 1, out, key, templates=company_folder(tmp_path, body))
    assert not out.exists() or list(out.iterdir()) == []
    return caught.value.message


def key_material(key: StationKey) -> list[str]:
    """Every form the private key could leak in: its PEM, the PEM body, its 32-byte scalar as hex and base64."""
    pem = key.private_key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                        serialization.NoEncryption()).decode()
    raw = key.private_key.private_numbers().private_value.to_bytes(32, "big")
    body = "".join(pem.strip().splitlines()[1:-1])
    return [pem, body, raw.hex(), base64.b64encode(raw).decode(), repr(raw)]


def test_the_globals_escape_through_a_callable_fails_naming_file_and_line(db_url, key, tmp_path) -> None:
    message = refusal(db_url, key, tmp_path, "<p>{{ record.unit.serial }}</p>\n\n"
                      "{{ cycler.__init__.__globals__.os.popen('id').read() }}\n"
                      "{% include '_tamper_evidence.html.j2' %}")
    assert re.fullmatch(r".*/company/certificate\.html\.j2 line 3: the template tried an unsafe operation "
                        r"\(access to attribute '__init__' of 'type' object\): templates may only format the "
                        r"data they are given", message), message


def test_the_globals_of_a_function_are_refused(db_url, key, tmp_path) -> None:
    message = refusal(db_url, key, tmp_path, "{{ lipsum.__globals__['os'].popen('id').read() }}")
    assert "certificate.html.j2 line 1: " + UNSAFE + " (access to attribute '__globals__' of 'function' object)" \
        in message


def test_a_subclasses_walk_is_refused(db_url, key, tmp_path) -> None:
    message = refusal(db_url, key, tmp_path, "{% for c in ''.__class__.__mro__[1].__subclasses__() %}"
                                             "{{ c }}{% endfor %}")
    assert UNSAFE in message and "'__class__'" in message


def test_reading_the_key_file_is_refused_every_way(db_url, key, tmp_path) -> None:
    path = str(key.path)
    attempts = [f"{{{{ lipsum.__globals__['__builtins__'].open('{path}').read() }}}}",
                f"{{{{ namespace.__init__.__globals__.__builtins__.open('{path}').read() }}}}",
                f"{{{{ self._TemplateReference__context.environment.loader.get_source(none, '{path}') }}}}"]
    for body in attempts:
        assert UNSAFE in refusal(db_url, key, tmp_path, body), body
    assert "'open' is undefined" in refusal(db_url, key, tmp_path, f"{{{{ open('{path}').read() }}}}")


@pytest.mark.parametrize("statement", ["include '{}'", "extends '{}'", "import '{}' as other"])
@pytest.mark.parametrize("name", ["{key}", "../keys/station-key.pem", "../../{rel}"])
def test_a_file_outside_the_template_folders_is_never_loaded(db_url, key, tmp_path, name, statement) -> None:
    # jinja2's FileSystemLoader refuses absolute names and any ".." path segment (jinja2.loaders.split_template_path).
    name = name.format(key=key.path, rel=key.path.relative_to(tmp_path.parent))
    tag = "{% " + statement.format(name) + " %}"
    message = refusal(db_url, key, tmp_path, f"{tag}{{% include '_tamper_evidence.html.j2' %}}")
    assert re.search(r"certificate\.html\.j2 line 1: expected a template named .* in the template folders, "
                     r"found none", message), message


def test_a_template_cannot_change_the_data_it_formats(db_url, key, tmp_path) -> None:
    message = refusal(db_url, key, tmp_path, "{{ record.unit.update({'serial': 'X'}) }}"
                                             "{% include '_tamper_evidence.html.j2' %}")
    assert UNSAFE in message and "'update'" in message


def test_the_command_exits_2_with_one_line_and_writes_nothing(db_url, key, tmp_path) -> None:
    folder = company_folder(tmp_path, "{{ lipsum.__globals__.os.popen('id').read() }}")
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["certificate", "run:1", "--db", db_url, "--key", str(key.path),
                                       "--templates", str(folder), "--out", str(out)])
    assert result.exit_code == 2
    errors = [line for line in result.stderr.splitlines() if line.startswith("knobline: error:")]
    assert len(errors) == 1 and UNSAFE in errors[0] and "Traceback" not in result.output
    assert "uid=" not in result.output and not out.exists()


def test_the_batch_report_template_is_sandboxed_too(db_url, tmp_path) -> None:
    folder = company_folder(tmp_path, "{{ title }}\n{{ title.__class__.__mro__ }}", name="batch.html.j2")
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["report", "batch", "--db", db_url, "--templates", str(folder),
                                       "--out", str(out)])
    assert result.exit_code == 2, result.output
    assert "batch.html.j2 line 2: " + UNSAFE in result.stderr
    assert not (out / "batch-report.html").exists()


def test_a_template_syntax_error_names_the_file_and_line(db_url, key, tmp_path) -> None:
    message = refusal(db_url, key, tmp_path, "<p>\n{% for x in %}\n")
    assert re.search(r"certificate\.html\.j2 line 2: the template does not parse", message), message


DUMP = """{%- macro dump(value) -%}
{%- if value is mapping -%}{ {% for k, v in value.items() %}{{ k }}: {{ dump(v) }}; {% endfor %}}
{%- elif value is iterable and value is not string -%}[ {% for v in value %}{{ dump(v) }}, {% endfor %}]
{%- else -%}{{ value }}{%- endif -%}
{%- endmacro -%}
{% for name in NAMES %}{{ name }} = {{ dump(NAMES[name]) }}
{% endfor %}{% include '_tamper_evidence.html.j2' %}"""

CONTEXT_NAMES = ("record", "seal", "decision_rules", "qr", "safety_caution", "issuer", "record_json",
                 "seal_json", "record_element_id", "seal_element_id")


def test_no_value_reachable_from_the_context_holds_the_private_key(db_url, key, tmp_path) -> None:
    names = "{" + ", ".join(f"'{n}': {n}" for n in CONTEXT_NAMES) + "}"
    files = write(db_url, 1, tmp_path / "out", key, templates=company_folder(tmp_path, DUMP.replace(
        "NAMES", names, 1).replace("NAMES[name]", f"{names}[name]")))
    html = files.html.read_text(encoding="utf-8")
    # The dump works: it reached the record's leaves and the seal's public key.
    assert "PW22-000001" in html and "CAL-26-0117" in html and files.seal.fingerprint in html
    for secret in key_material(key):
        assert secret not in html
    with open_store(db_url) as store:
        assert verify_certificate(read_certificate_file(files.html), key.private_key.public_key(), store).verified


def test_live_objects_never_enter_a_template_context(key) -> None:
    # A dataclass is data only as far as its fields are: the key object inside is refused.
    with pytest.raises(SoftwareFault, match=r"template key\.private_key: expected plain data .* found ECPrivateKey"):
        plain_data(key, "key")
    with pytest.raises(SoftwareFault, match="found PosixPath"):
        plain_data([key.path], "folders")
    with pytest.raises(SoftwareFault, match="found function"):
        plain_data({"pct": lambda x: x}, "context")
    assert json.dumps(plain_data({"path": [1, (2.5, None)], "ok": True}))  # plain data passes as JSON would


def test_a_user_stylesheet_alone_restyles_the_shipped_certificate(db_url, key, tmp_path) -> None:
    folder = company_folder(tmp_path, "body { font-family: 'ACME Sans'; }\n.verdict { color: teal; }",
                            name="certificate.css")
    files = write(db_url, 1, tmp_path / "out", key, templates=folder)
    html = files.html.read_text(encoding="utf-8")
    assert "font-family: 'ACME Sans'" in html and "Tamper evidence" in html  # shipped page, company style
    with open_store(db_url) as store:
        assert verify_certificate(read_certificate_file(files.html), key.private_key.public_key(), store).verified


def test_a_user_layout_with_blocks_macros_and_loops_still_renders(db_url, key, tmp_path) -> None:
    folder = company_folder(tmp_path, "{% extends 'base.html.j2' %}{% block body %}"
                                      "{% for s in record.steps %}{{ row(s) }}{% endfor %}"
                                      "{% include '_tamper_evidence.html.j2' %}{% endblock %}")
    (folder / "base.html.j2").write_text(
        "{% macro row(s) %}<li>{{ s.name | upper }}: {{ s.verdict }} ({{ s.measurements | length }})</li>"
        "{% endmacro %}<html><body><h1>{{ record.certificate_number }}</h1>{% block body %}{% endblock %}"
        "<p>{{ 0.93 | pct }}</p></body></html>", encoding="utf-8")
    html = write(db_url, 1, tmp_path / "out", key, templates=folder).html.read_text(encoding="utf-8")
    assert "<li>KNOB STOPS: fail (2)</li>" in html and "<p>93.0 %</p>" in html


def test_render_template_errors_for_an_unknown_name_say_where(tmp_path) -> None:
    folder = company_folder(tmp_path, "a\nb {{ nothing_here }}", name="t.j2")
    with pytest.raises(UserInputError, match=r"t\.j2 line 2: 'nothing_here' is undefined"):
        render_template(make_environment([folder]), "t.j2", {})


# Denial of service through a template: jinja2's sandbox bounds `range` (jinja2.sandbox.MAX_RANGE)
# but not repetition or format widths; our bounds are ours (common practice, no source).
@pytest.mark.parametrize("body", ["{{ 'a' * 1000000000 }}", "{{ [1] * 1000000000 }}", "{{ '%999999999d' % 1 }}",
                                  "{{ '%999999999d' | format(1) }}", "{{ 7 ** 100000000 }}"],
                         ids=["text-repeat", "list-repeat", "percent-width", "format-filter-width", "power"])
def test_a_template_that_would_build_a_huge_value_is_refused_naming_file_and_line(db_url, key, tmp_path,
                                                                                   body) -> None:
    message = refusal(db_url, key, tmp_path, body)
    assert "certificate.html.j2 line 1: the template is too costly to render" in message, message


def test_a_template_that_runs_past_its_time_is_stopped_with_one_line(db_url, key, tmp_path, monkeypatch) -> None:
    monkeypatch.setattr("fixture.reporting.templating.RENDER_LIMIT_S", 0.5)
    message = refusal(db_url, key, tmp_path, "{% for i in range(99999) %}{% for j in range(99999) %}"
                                             "{% endfor %}{% endfor %}")
    assert "certificate.html.j2 line 1: the template is too costly to render (rendering took longer than 0.5 s)" \
        in message, message
