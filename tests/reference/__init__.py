"""Independent reference implementations used by the tests."""

from __future__ import annotations
