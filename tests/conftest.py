"""Hypothesis profiles of the property tests (`tests/test_properties.py`) and the summary of
their cases at the end of the session.

- ``quick`` (default, `make test`): a few examples per call, reproducible (``derandomize``),
  no example database written anywhere;
- ``soak`` (`make properties`): at least 20,000 examples over all calls.

Choose one with ``--hypothesis-profile=soak`` or ``BAGWISE_HYPOTHESIS_PROFILE=soak``.
"""

from __future__ import annotations

import json
import os
import sys

from hypothesis import HealthCheck, settings

_COMMON = dict(deadline=None, database=None, derandomize=True, print_blob=False,
               suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                      HealthCheck.filter_too_much,
                                      HealthCheck.function_scoped_fixture])
settings.register_profile("quick", max_examples=12, **_COMMON)
settings.register_profile("soak", max_examples=600, **_COMMON)
settings.load_profile(os.environ.get("BAGWISE_HYPOTHESIS_PROFILE", "quick"))


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    properties = sys.modules.get("_properties")
    if properties is None or not properties.TALLY:
        return
    tally = properties.TALLY
    columns = ("tried", "accepted", "refused", "crashes")
    width = max(len(name) for name in tally) + 2
    write = terminalreporter.write_line
    write("")
    write(f"property cases (hypothesis profile {settings.get_current_profile_name()})")
    write("call".ljust(width) + "".join(c.rjust(10) for c in columns))
    totals = dict.fromkeys(columns, 0)
    for name in sorted(tally):
        write(name.ljust(width) + "".join(str(tally[name][c]).rjust(10) for c in columns))
        for c in columns:
            totals[c] += tally[name][c]
    write("total".ljust(width) + "".join(str(totals[c]).rjust(10) for c in columns))
    path = os.environ.get("BAGWISE_PROPERTIES_SUMMARY")
    if path:
        with open(path, "w", encoding="utf-8") as handle:
            json.dump({"profile": settings.get_current_profile_name(), "total": totals,
                       "calls": {n: {c: tally[n][c] for c in columns} for n in sorted(tally)}},
                      handle, indent=2)
