#!/usr/bin/env bash
# The project's test command, for developers and CI alike:
#
#   bash tools/test.sh [PYTEST ARGUMENTS...]
#
# 1. installs what is missing: Debian's libportaudio2, jackd2 and jack-tools, and this
#    package with its test extras (editable);
# 2. runs ruff (lint and format check) and mypy on the whole tree;
# 3. starts a private JACK server with the dummy driver (no sound card needed), so that the
#    tests marked `live` open real audio streams, and stops it at exit, even on failure;
# 4. runs pytest with the given arguments.
#
# Exit status: pytest's own status when pytest fails (5, "no tests collected", counts as a
# failure too); 1 when pytest passed but a lint or type check failed; 0 when all passed.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."

PYTHON=${PYTHON:-python}
SYSTEM_PACKAGES=(libportaudio2 jackd2 jack-tools chromium)

section() { printf '\n=== %s ===\n' "$1"; }

install_system_packages() {
    local missing=() pkg
    for pkg in "${SYSTEM_PACKAGES[@]}"; do
        if [[ $(dpkg-query -W -f='${db:Status-Status}' "$pkg" 2>/dev/null) != installed ]]; then
            missing+=("$pkg")
        fi
    done
    if ((${#missing[@]} == 0)); then
        echo "already installed: ${SYSTEM_PACKAGES[*]}"
        return
    fi
    local as_root=()
    [[ $(id -u) -eq 0 ]] || as_root=(sudo)
    echo "installing: ${missing[*]}"
    "${as_root[@]}" env DEBIAN_FRONTEND=noninteractive apt-get update -qq
    "${as_root[@]}" env DEBIAN_FRONTEND=noninteractive \
        apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
}

# Exit 0 when this checkout is installed in editable mode, with the version, commands and
# (test) requirements that pyproject.toml asks for; pip is then skipped (it takes seconds).
python_install_is_current() {
    "$PYTHON" - <<'PY'
import json
import sys
import tomllib
from importlib import metadata
from pathlib import Path

from packaging.requirements import Requirement

project = tomllib.loads(Path("pyproject.toml").read_text())["project"]
dist = metadata.distribution(project["name"])
direct_url = json.loads(dist.read_text("direct_url.json") or "{}")
here = Path.cwd().resolve().as_uri()
if direct_url.get("url") != here or not direct_url.get("dir_info", {}).get("editable"):
    sys.exit(1)
if dist.version != project["version"]:
    sys.exit(1)
scripts = {ep.name: ep.value for ep in dist.entry_points if ep.group == "console_scripts"}
if scripts != project.get("scripts", {}):
    sys.exit(1)
wanted = project["dependencies"] + project["optional-dependencies"]["test"]
for line in wanted:
    requirement = Requirement(line)
    if requirement.marker is not None and not requirement.marker.evaluate({"extra": "test"}):
        continue
    try:
        version = metadata.version(requirement.name)
    except metadata.PackageNotFoundError:
        sys.exit(1)
    if not requirement.specifier.contains(version, prereleases=True):
        sys.exit(1)
PY
}

install_python_packages() {
    if python_install_is_current 2>/dev/null; then
        echo "already installed: filtertwin (editable) and its test requirements"
        return
    fi
    "$PYTHON" -m pip install --quiet --disable-pip-version-check --root-user-action=ignore \
        -e '.[test]'
}

jack_pid=""
jack_log=""

stop_jack() {
    if [[ -n $jack_pid ]] && kill -0 "$jack_pid" 2>/dev/null; then
        kill -TERM "$jack_pid"
        local waited
        for ((waited = 0; waited < 100; waited++)); do  # up to 5 s; a clean exit takes ~1.4 s
            kill -0 "$jack_pid" 2>/dev/null || break
            sleep 0.05
        done
        if kill -0 "$jack_pid" 2>/dev/null; then
            echo "JACK server did not stop on SIGTERM; killing it" >&2
            kill -KILL "$jack_pid"
            rm -f /dev/shm/jack_"${JACK_DEFAULT_SERVER}"_* \
                /dev/shm/jack_sem.*_"${JACK_DEFAULT_SERVER}"_*
        fi
        wait "$jack_pid" 2>/dev/null || true
    fi
    jack_pid=""
    [[ -z $jack_log ]] || rm -f "$jack_log"
}

start_jack() {
    export JACK_DEFAULT_SERVER="ft_ci_$$"
    export JACK_NO_START_SERVER=1
    jack_log=$(mktemp "${TMPDIR:-/tmp}/ft_jackd.XXXXXX")
    bash tools/jack_server.sh "$JACK_DEFAULT_SERVER" >"$jack_log" 2>&1 &
    jack_pid=$!
    local tries
    for ((tries = 0; tries < 200; tries++)); do  # up to 10 s; it usually answers in ~0.2 s
        if jack_lsp >/dev/null 2>&1; then
            # tests/conftest.py uses this server instead of starting its own
            export FILTERTWIN_TEST_JACK_SERVER="$JACK_DEFAULT_SERVER"
            echo "JACK dummy server '$JACK_DEFAULT_SERVER' (pid $jack_pid) is up"
            return 0
        fi
        kill -0 "$jack_pid" 2>/dev/null || break
        sleep 0.05
    done
    echo "JACK server '$JACK_DEFAULT_SERVER' did not start; its output:" >&2
    cat "$jack_log" >&2
    return 1
}

trap stop_jack EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

section "system packages"
install_system_packages
section "python packages"
install_python_packages

checks_failed=0
section "ruff check"
"$PYTHON" -m ruff check . || checks_failed=1
section "ruff format --check"
"$PYTHON" -m ruff format --check . || checks_failed=1
section "mypy"
"$PYTHON" -m mypy || checks_failed=1

section "JACK dummy server"
start_jack

section "pytest"
pytest_status=0
"$PYTHON" -m pytest "$@" || pytest_status=$?

if ((pytest_status == 5)); then
    echo "pytest collected no tests: counted as a failure" >&2
fi
if ((pytest_status != 0)); then
    exit "$pytest_status"
fi
if ((checks_failed)); then
    echo "tests passed, but ruff or mypy reported problems (see above)" >&2
    exit 1
fi
echo "all checks passed"
