#!/usr/bin/env bash
# Run a private JACK server with the dummy driver (no sound card needed) in the foreground.
#
#   bash tools/jack_server.sh NAME [RATE_HZ]
#
# Removes shared-memory files left behind by an earlier server of the same NAME (a server
# killed with SIGKILL leaves them, and the next start fails), then replaces this shell with
# jackd, so the caller's PID is the server's PID: stop it with SIGTERM (or Ctrl-C).
# Clients find it with JACK_DEFAULT_SERVER=NAME; set JACK_NO_START_SERVER=1 so that no
# client ever starts a server of its own.
set -euo pipefail

if [[ $# -lt 1 || $# -gt 2 || ! $1 =~ ^[A-Za-z0-9_]+$ ]]; then
    echo "usage: bash tools/jack_server.sh NAME [RATE_HZ]  (NAME: letters, digits, _)" >&2
    exit 2
fi
name=$1
rate_hz=${2:-48000}

if ! command -v jackd >/dev/null; then
    echo "jackd not found: install Debian's jackd2 (apt-get install jackd2)" >&2
    exit 2
fi

rm -f /dev/shm/jack_"${name}"_* /dev/shm/jack_sem.*_"${name}"_*

# period 256 frames, 2 capture and 2 playback ports; no real-time scheduling needed.
exec jackd -n "$name" --no-realtime -d dummy -r "$rate_hz" -p 256 -C 2 -P 2
