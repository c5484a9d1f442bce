# What the reference checks share: reading the cases a cmocka test wrote as
# JSON lines under $B/tests/. Not a check itself (the runner takes only
# tests/ref/*.py).
import json
import os


def cases_path(name):
    """$B/tests/NAME (B: the build folder the tests ran from, default build)."""
    return os.path.join(os.environ.get("B") or "build", "tests", name)


def read_cases(path, producer, least):
    """The cases in path, or None after a FAIL line saying what is wrong."""
    if not os.path.exists(path):
        print("FAIL: no %s (run %s first, with the same B)" % (path, producer))
        return None
    try:
        with open(path) as f:
            cases = [json.loads(line) for line in f if line.strip()]
    except ValueError as e:
        print("FAIL: %s is not JSON lines: %s" % (path, e))
        return None
    if len(cases) < least:
        print("FAIL: %s holds %d cases, want at least %d" % (path, len(cases), least))
        return None
    return cases
