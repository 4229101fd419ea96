"""Limits on the size of what a user asks for, checked before any work starts."""

from __future__ import annotations

MAX_DESIGNS = 500  # a study with more combinations than this needs --yes
