"""Small vocabularies that the command-line parser and the config share, importable alone.

``ionwarden --help`` builds the whole parser; what its choices need lives here, so that help
does not import the config package, the records or numpy (start-up is what a user waits for).
"""

from __future__ import annotations

NOTE_KINDS: tuple[str, ...] = ("column", "source", "calibration", "other")
"""Kinds of events on the record (``ionwarden note --kind``); ``reset_baselines_on`` names some."""
