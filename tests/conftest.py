"""Suite-wide test settings.

Under CI (``CI=true``) nothing may be skipped silently: a skipped test is turned into a
failure, so a missing browser or database server shows up as red, not as a quiet skip.
"""
from __future__ import annotations

import os

import pytest
from hypothesis import settings

IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}

# CI runs the property tests on a fixed sequence of examples (a red CI run must be repeatable);
# a developer's run explores new examples each time. FISHWAY_HYPOTHESIS=stress explores more.
settings.register_profile("ci", derandomize=True, print_blob=True)
settings.register_profile("stress", max_examples=2000, deadline=None, print_blob=True)
settings.load_profile(os.environ.get("FISHWAY_HYPOTHESIS", "ci" if IN_CI else "default"))


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):
    outcome = yield
    report = outcome.get_result()
    if IN_CI and report.skipped and not hasattr(report, "wasxfail"):
        report.outcome = "failed"
        reason = report.longrepr[-1] if isinstance(report.longrepr, tuple) else report.longrepr
        report.longrepr = f"skipped under CI, which is not allowed: {reason}"


def pytest_collection_modifyitems(session, config, items):
    """Run the browser tests last. Playwright's session-wide event loop stays running in the
    main thread once it starts, and ``asyncio.run`` (the OPC UA server tests, the simulator's
    command line) refuses to run under it."""
    def uses_browser(item) -> bool:
        return bool({"page", "browser", "context"} & set(getattr(item, "fixturenames", ())))

    items[:] = [i for i in items if not uses_browser(i)] + [i for i in items if uses_browser(i)]
