"""Custom step callables the runner tests reference by module path."""

from __future__ import annotations

import time


def wait_forever(context, parameters):
    """Blocks, so a test can kill the process in the middle of a run."""
    time.sleep(float(parameters.get("seconds", 60)))
    return "pass"


def always(context, parameters):
    return parameters.get("verdict", "pass"), "custom verdict"


def raises(context, parameters):
    """A custom step with a bug in it."""
    raise ValueError("could not convert string to float: '4.7.1'")


def interrupted(context, parameters):
    raise KeyboardInterrupt


def returns(context, parameters):
    """Returns whatever the test put in ``parameters['value']`` (a string, or a list for a pair)."""
    value = parameters.get("value")
    return tuple(value) if isinstance(value, list) else value


def sabotage(context, parameters):
    """Passes, and leaves an instrument misbehaving for every later step the way ``parameters`` say.

    ``role``: counter (its reading), supply (its current reading) or actuator (a move);
    ``fault``: nan, inf, reset (a socket reset), value-error, overflow (SCPI 9.91E37) or interrupt (Ctrl-C).
    """
    import math

    from fixture.errors import OverflowReading

    role, fault = parameters["role"], parameters["fault"]
    driver = context.station.driver(role)
    method = {"counter": "read", "supply": "measure_current", "actuator": "move_both"}[role]

    def broken(*args, **kwargs):
        if fault == "nan":
            return math.nan
        if fault == "inf":
            return float("1E999")
        if fault == "reset":
            raise ConnectionResetError(104, "Connection reset by peer")
        if fault == "value-error":
            raise ValueError("could not convert string to float: '1.2.3'")
        if fault == "overflow":
            raise OverflowReading(f"{role}: 9.91E37 (simulated overflow)")
        raise KeyboardInterrupt

    setattr(driver, method, broken)
    return "pass"


def exits(context, parameters):
    """A custom step (or a library it calls) that ends the process with ``sys.exit(code)``."""
    import sys

    sys.exit(int(parameters.get("code", "0")))


def terminated(context, parameters):
    """The process is sent SIGTERM (a supervisor stopping it) in the middle of a run."""
    import os
    import signal

    os.kill(os.getpid(), signal.SIGTERM)
    time.sleep(float(parameters.get("seconds", 30)))  # the signal arrives during this wait
    return "pass"
