"""Offline analysis of recorded sessions: loading, metrics, reports, figures and test plans.

Kept import-light on purpose: the configuration validator imports :mod:`rigloop.analysis.plan`,
and that must not pull in matplotlib. Import the submodules you need directly.
"""

from __future__ import annotations
