"""What the fuzz tests report: the open defects they know, and the failure report.

A fuzz failure is ``(argv, description of the input, why it broke the contract)``.
"""

from __future__ import annotations

import json
import os


# Open defects the fuzz finds, each owned by a module another helper is fixing this wave.
# A fuzz failure that matches one is reported (printed), not failed; each has a minimal
# reproduction in tests/test_fuzz_known.py marked ``xfail(strict=True)``, which turns red
# when the defect is fixed: then delete the entry here and the mark there.
def _traceback_of(failure: str, *names: str) -> bool:
    return failure.startswith("traceback") and any(name in failure for name in names)


KNOWN_DEFECTS = {
}


def known_defect(argv, failure: str) -> str | None:
    """The name of the open defect (:data:`KNOWN_DEFECTS`) a failure shows, or None."""
    for name, (_, matches) in KNOWN_DEFECTS.items():
        if matches(argv, failure):
            return name
    return None


def split_known(failures):
    """``(new failures, {known defect: count})`` of ``[(argv, notes, failure), ...]``.

    With ``LOWFOLD_FUZZ_REPORT=FILE`` in the environment, every failure (known or new) is
    also appended to FILE, one JSON object a line.
    """
    new, known = [], {}
    log = os.environ.get("LOWFOLD_FUZZ_REPORT")
    for argv, notes, failure in failures:
        name = known_defect(argv, failure)
        if log:
            with open(log, "a") as fh:
                fh.write(json.dumps({"argv": [str(a) for a in argv], "input": str(notes),
                                     "failure": failure, "known": name}) + "\n")
        if name is None:
            new.append((argv, notes, failure))
        else:
            known[name] = known.get(name, 0) + 1
    return new, known


def report(failures) -> str:
    """The first 40 failures, each with its input and command line."""
    return f"{len(failures)} runs broke the contract:\n" + "\n".join(
        f"- {notes}\n    lowfold {' '.join(map(repr, argv))}\n    {failure}"
        for argv, notes, failure in failures[:40])
