"""The ``@sim`` backend resolves inside instruments/ to the simulated bench's shipped device file."""

from __future__ import annotations

from fixture.instruments.backends import BackendResolver
from fixture.sim.devices import RESOURCES, device_file


def test_sim_backend_resolves_to_the_shipped_bench_file_once_per_resolver() -> None:
    # pyvisa-sim spells a device-file backend "PATH@sim" and caches state by the literal string
    # (../shared/pyvisa-sim-notes.md, "Shared state"): one resolver must hand out one spelling.
    with BackendResolver() as resolve, device_file() as shipped:
        first = resolve("@sim")
        assert first == f"{shipped}@sim" and resolve("@sim") == first
        text = shipped.read_text(encoding="utf-8")
        assert all(resource.split("::")[1] in text for resource in RESOURCES.values())


def test_other_backends_pass_through_unchanged(tmp_path) -> None:
    # pyvisa's own spec strings: "" system VISA, "@py" pyvisa-py, "file.yaml@sim" a named device file
    with BackendResolver() as resolve:
        for backend in ("", "@py", f"{tmp_path / 'own.yaml'}@sim"):
            assert resolve(backend) == backend
