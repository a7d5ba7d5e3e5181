#!/bin/sh
# Example CI step (demo): check every coil channel of the invented greenhouse board on each change.
# Exit status: 0 all checks pass, 1 a check lost its margin, 2 a case is invalid or cannot be solved.
# report.xml is a JUnit XML report that CI systems show as they show unit tests.
set -e
cd "$(dirname "$0")/../.."
kickback check examples/board --junit report.xml
