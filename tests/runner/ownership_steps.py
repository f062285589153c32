"""A custom step the ownership tests reference by module path: it holds the run open until told to go."""

from __future__ import annotations

import time
from pathlib import Path


def wait_for_flag(context, parameters):
    """Wait (at most ``seconds``) until the file ``flag`` exists, like an operator prompt left open."""
    flag = Path(parameters["flag"])
    deadline = time.monotonic() + float(parameters.get("seconds", 120))
    while not flag.exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    return "pass"
