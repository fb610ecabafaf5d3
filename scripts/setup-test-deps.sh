#!/usr/bin/env bash
# Installs what the test suite needs beyond the Rust toolchain: Debian's Chromium, which the
# browser tests use to open the generated report from disk, and the npm package
# playwright-core (pinned in tests/browser/package-lock.json) that drives it. No browser is
# downloaded: tests/browser/check_report.mjs runs /usr/bin/chromium. It also installs DuckDB's
# Python package (pinned below) from PyPI for tests/export.rs, which runs
# scripts/duckdb/run_baseline.py over an export. Safe to run again.
set -euo pipefail
cd "$(dirname "$0")/.."
if ! command -v chromium >/dev/null 2>&1; then
    SUDO=""
    [ "$(id -u)" -eq 0 ] || SUDO="sudo"
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium >/dev/null
fi
chromium --version
# npm ci installs exactly the locked versions; skipped when the lock file it last installed
# (kept in node_modules) is unchanged.
stamp=tests/browser/node_modules/.installed-package-lock.json
if ! cmp -s tests/browser/package-lock.json "$stamp"; then
    (cd tests/browser && PLAYWRIGHT_SKIP_BROWSER_DOWNLOAD=1 npm ci --no-audit --no-fund --loglevel=error)
    cp tests/browser/package-lock.json "$stamp"
fi
node -e "process.stdout.write('playwright-core ' + require('./tests/browser/node_modules/playwright-core/package.json').version + '\n')"
# DuckDB for the export test; skipped when the pinned version is already there.
DUCKDB_VERSION=1.5.6
if ! python3 -c "import duckdb, sys; sys.exit(duckdb.__version__ != '$DUCKDB_VERSION')" 2>/dev/null; then
    python3 -m pip install --quiet --disable-pip-version-check --root-user-action=ignore "duckdb==$DUCKDB_VERSION"
fi
python3 -c "import duckdb; print('duckdb', duckdb.__version__)"
