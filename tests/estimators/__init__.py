"""Tests of spillgauge.estimators (a package, so test module names may repeat elsewhere)."""
