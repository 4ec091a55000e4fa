#!/usr/bin/env bash
# Regenerates the example reports that README.md links to. Never edit them by hand.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
bin=target/release/emsplan
"$bin" report problems/growth-chambers.toml -o docs/examples/growth-chambers-report.html
"$bin" report problems/growth-chambers.toml --markdown -o docs/examples/growth-chambers-report.md
