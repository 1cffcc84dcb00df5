#!/usr/bin/env bash
set -u
. "$(dirname "$0")/lib.sh"
skip "not written yet"
