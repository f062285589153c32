"""Custom step callables the runner tests reference by module path."""

from __future__ import annotations

import time


def wait_forever(context, parameters):
    """Blocks, so a test can kill the process in the middle of a run."""
    time.sleep(float(parameters.get("seconds", 60)))
    return "pass"


def always(context, parameters):
    return parameters.get("verdict", "pass"), "custom verdict"
