#!/usr/bin/env bash
# Installs the Debian packages the test suite needs when they are missing:
#   influxdb (1.x server, v1 API), victoria-metrics (v2 write path), chromium (page and report tests),
#   systemd (systemd-analyze verify of deploy/radcast.service),
#   python3-numpy/scipy/sklearn (reference values and the side-by-side fit benchmark).
# The test setup starts the servers itself on free loopback ports; nothing here starts a service.
set -euo pipefail
need=()
command -v influxd >/dev/null 2>&1 || need+=(influxdb)
command -v victoria-metrics >/dev/null 2>&1 || need+=(victoria-metrics)
command -v chromium >/dev/null 2>&1 || need+=(chromium)
command -v systemd-analyze >/dev/null 2>&1 || need+=(systemd)
# Reference checks call Debian's /usr/bin/python3 with numpy, scipy and scikit-learn.
/usr/bin/python3 -c 'import numpy, scipy, sklearn' >/dev/null 2>&1 || need+=(python3-numpy python3-scipy python3-sklearn)
if [ ${#need[@]} -eq 0 ]; then
  echo "test dependencies present"
  exit 0
fi
if [ "$(id -u)" != "0" ]; then
  echo "missing Debian packages: ${need[*]} (run as root: apt-get install -y ${need[*]})" >&2
  exit 1
fi
echo "installing: ${need[*]}"
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq
apt-get install -y -qq --no-install-recommends "${need[@]}"
