"""Shared helpers for packbook's CLI tests (run by meson with Debian's python3).

PACKBOOK in the environment is the binary under test; meson sets it.
"""
import atexit
import json
import os
import re
import shutil
import subprocess
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.normpath(os.path.join(HERE, "..", ".."))
DATA = os.path.join(ROOT, "tests", "data")
PACKBOOK = os.environ.get("PACKBOOK") or os.path.join(ROOT, "build", "packbook")
if os.sep in PACKBOOK:
    PACKBOOK = os.path.abspath(PACKBOOK)  # tests that change directory still find it
PY = "/usr/bin/python3"  # Debian's, with numpy (the simulator needs it)
# A settings file of the developer's (~/.config/packbook/config) must not change what the tests
# see: point packbook at one that does not exist (test_config sets its own per run).
os.environ["PACKBOOK_CONFIG"] = os.path.join(tempfile.gettempdir(), "pbtest-no-such-dir",
                                             "config")
PBSIM = os.path.join(ROOT, "scripts", "pbsim.py")  # the flight simulator with known truth


def run(*args, stdin=None, timeout=120):
    """Runs packbook; returns (exit status, stdout, stderr)."""
    p = subprocess.run([PACKBOOK, *map(str, args)], input=stdin, capture_output=True,
                       timeout=timeout)
    return p.returncode, p.stdout.decode("utf-8", "replace"), p.stderr.decode("utf-8", "replace")


def analyze_json(path, *args):
    """analyze --json on a file; returns the parsed document (asserts exit 0)."""
    rc, out, err = run("analyze", path, "--json", *args)
    if rc != 0:
        raise AssertionError(f"packbook analyze {path} exited {rc}: {err}")
    return json.loads(out)


_CLEANUP = []


@atexit.register
def _remove_temporaries():
    """Temporary files and folders go when the test program ends (CI's machine is fresh, but a
    developer's /tmp is not)."""
    for path in reversed(_CLEANUP):
        if os.path.isdir(path):
            shutil.rmtree(path, ignore_errors=True)
        elif os.path.exists(path):
            os.unlink(path)


def temp_dir(prefix):
    """A new temporary folder, removed when the test program ends."""
    path = tempfile.mkdtemp(prefix=prefix)
    _CLEANUP.append(path)
    return path


def write_temp(text, suffix=".csv", mode="w"):
    """Writes text (or bytes with mode='wb') to a temporary file, removed when the test program
    ends; returns its path."""
    fd, path = tempfile.mkstemp(suffix=suffix, prefix="pbtest-")
    _CLEANUP.append(path)
    with os.fdopen(fd, mode) as f:
        f.write(text)
    return path


def warning_codes(doc):
    return [w["code"] for w in doc["warnings"]]


def c_string_array(path, array):
    """The entries of `static const char *const ARRAY[] = {...};` in a C source: each entry's
    adjacent string literals joined (a schema step's SQL), comments (which may hold commas)
    left out."""
    with open(path) as f:
        text = f.read()
    m = re.search(array + r"\[\]\s*=\s*\{(.*?)\n\};", text, re.S)
    assert m, f"no {array}[] in {path}"
    body = re.sub(r"/\*.*?\*/", " ", m.group(1), flags=re.S)
    steps, cur = [], []
    for tok in re.finditer(r'"((?:[^"\\]|\\.)*)"|(,)', body):
        if tok.group(2):
            if cur:
                steps.append("".join(cur))
                cur = []
        else:
            cur.append(tok.group(1).encode().decode("unicode_escape"))
    if cur:
        steps.append("".join(cur))
    return steps
