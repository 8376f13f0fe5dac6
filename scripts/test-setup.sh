#!/bin/sh
# What the test suite needs from the system, before `pip install ".[test]"` adds the Python
# packages: a Chromium for the report's browser test (tests/test_report_browser.py).
#
# That test drives Debian's chromium package at /usr/bin/chromium, or the browser named by
# POLICY_TEST_CHROMIUM (a path, or a command on PATH). Where that browser is already there,
# this script changes nothing. Where Debian's is missing, it installs the `chromium` package with
# apt-get: directly as root, through `sudo -n` otherwise, and where neither is possible it stops
# and says what to run as root. It never fetches a browser any other way.
#
# Usage, from the repository's root: sh scripts/test-setup.sh
set -eu

DEBIAN_CHROMIUM=/usr/bin/chromium

say() {
    printf 'test-setup: %s\n' "$*"
}

stop() {
    printf 'test-setup: %s\n' "$*" >&2
    exit 1
}

# The same test as the browser test's: an executable file at a path, or a command on PATH.
browser_found() {
    case $1 in
        */*) [ -f "$1" ] && [ -x "$1" ] ;;
        *) command -v "$1" >/dev/null 2>&1 ;;
    esac
}

if [ -n "${POLICY_TEST_CHROMIUM:-}" ]; then
    # The user chose a browser of their own: check it, install nothing.
    if browser_found "$POLICY_TEST_CHROMIUM"; then
        say "Chromium for the browser test: $POLICY_TEST_CHROMIUM (from POLICY_TEST_CHROMIUM)."
        exit 0
    fi
    stop "POLICY_TEST_CHROMIUM is set to '$POLICY_TEST_CHROMIUM', which is not an executable file" \
        "or a command on PATH. Point it at a Chromium, or unset it to use Debian's chromium package" \
        "($DEBIAN_CHROMIUM), which this script installs where it is missing."
fi

if browser_found "$DEBIAN_CHROMIUM"; then
    say "Chromium for the browser test: $DEBIAN_CHROMIUM (already installed)."
    exit 0
fi

AS_ROOT="apt-get update -q && DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium"

if ! command -v apt-get >/dev/null 2>&1; then
    stop "the report's browser test needs a Chromium, and there is none at $DEBIAN_CHROMIUM." \
        "This machine has no apt-get to install Debian's chromium package: install a Chromium" \
        "yourself and set POLICY_TEST_CHROMIUM to its path, then run this again."
fi

if [ "$(id -u)" -eq 0 ]; then
    run_as_root=""
elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
    run_as_root="sudo -n"
else
    stop "the report's browser test needs Debian's chromium package, which is not installed" \
        "($DEBIAN_CHROMIUM is missing), and installing it needs root: sudo is not available here" \
        "without a password. Run this as root, then run the test command again:
    $AS_ROOT"
fi

say "installing Debian's chromium package for the report's browser test${run_as_root:+ (with sudo)}."
# Wait for another apt or dpkg run (say, an upgrade started at boot) rather than fail at once
wait_for_lock="-o DPkg::Lock::Timeout=600"
$run_as_root env DEBIAN_FRONTEND=noninteractive apt-get $wait_for_lock update -q
$run_as_root env DEBIAN_FRONTEND=noninteractive apt-get $wait_for_lock install -y -q chromium

if ! browser_found "$DEBIAN_CHROMIUM"; then
    stop "apt-get installed the chromium package, but there is still no browser at $DEBIAN_CHROMIUM."
fi
say "Chromium for the browser test: $DEBIAN_CHROMIUM (installed)."
