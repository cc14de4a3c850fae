#!/usr/bin/env bash
# The dashboard test drives headless Chromium (Debian package "chromium"). Install it when it is
# missing and this user may; otherwise say how, and let the test report it.
set -u
command -v chromium >/dev/null 2>&1 && exit 0
if [[ $(id -u) -eq 0 ]] && command -v apt-get >/dev/null 2>&1; then
  echo "installing chromium for the dashboard test (apt-get) ..." >&2
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null) \
    || echo "warning: could not install chromium; the browser test will fail" >&2
else
  echo "note: chromium is missing; install it (apt-get install chromium) for the dashboard test" >&2
fi
exit 0
