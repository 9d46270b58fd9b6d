"""Keep astropy offline, and turn its degraded-accuracy warnings into notes.

astropy's defaults reach for the network: the IERS Earth-orientation tables are
downloaded again once the bundled predictions are 30 days old (and an offline machine
then fails with ``ValueError: interpolating from IERS_Auto using predictive values that
are more than 30.0 days old``). :func:`configure_astropy_offline` switches that off once,
so only the tables bundled with ``astropy-iers-data`` are used.

Beyond the end of those tables astropy still computes, with reduced accuracy, and says
so in warnings (polar motion "after IERS data is valid", ERFA "dubious year" for dates
past the leap-second table). Users must not see a wall of warnings, yet the loss of
accuracy must not be hidden: wrap astropy calls in :func:`degraded_accuracy_as_notes`,
which swallows those known warnings and records one plain note per kind, readable with
:func:`offline_notes` (the report lists them). Any other warning is passed on unchanged.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from contextlib import contextmanager

__all__ = ["configure_astropy_offline", "degraded_accuracy_as_notes", "offline_notes"]

# Largest |UT1 - UTC| allowed by the definition of UTC: 0.9 s (ITU-R TF.460-6, from memory).
_UT1_UTC_MAX_S = 0.9

_NOTE_IERS = (
    "Sun ephemeris: some times lie beyond the bundled IERS Earth-orientation tables, so "
    "UT1-UTC and polar motion were extrapolated; computed sun times may be off by up to "
    f"about {_UT1_UTC_MAX_S:g} s (positions by up to about 14 arcsec along the Sun's daily "
    "path), while durations and offsets between channels are unaffected. A newer "
    "astropy-iers-data package removes this."
)
_NOTE_LEAP = (
    "Sun ephemeris: some times lie beyond astropy's leap-second table ('dubious year'), so "
    "leap seconds announced after it are missing; computed sun times may be off by whole "
    "seconds. A newer astropy-iers-data package removes this."
)
_NOTE_RANGE = (
    "Sun ephemeris: some times lie outside 1900-2100, the valid range of the ERFA solar "
    "ephemeris (epv00); positions there are approximate."
)

# (category name, fragment of the message, note) for each known degraded-accuracy warning.
_KNOWN_WARNINGS = (
    ("AstropyWarning", "after IERS data is valid", _NOTE_IERS),
    ("AstropyWarning", "before IERS data is valid", _NOTE_IERS),
    ("IERSRangeError", "", _NOTE_IERS),
    ("IERSDegradedAccuracyWarning", "", _NOTE_IERS),
    ("IERSStaleWarning", "", _NOTE_IERS),
    ("ErfaWarning", "dubious year", _NOTE_LEAP),
    ("ErfaWarning", "1900-2100", _NOTE_RANGE),
)

_notes: list[str] = []


def configure_astropy_offline() -> None:
    """Make astropy use only its bundled IERS and leap-second tables, never the network.

    Safe to call any number of times; each call (re)applies the same three settings:
    ``iers.conf.auto_download = False``, ``iers.conf.auto_max_age = None`` and
    ``astropy.utils.data.conf.allow_internet = False``.
    """
    from astropy.utils import data, iers

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    data.conf.allow_internet = False


def offline_notes() -> list[str]:
    """The notes recorded so far about reduced ephemeris accuracy, oldest first.

    Returns
    -------
    list of str
        One plain sentence per kind of degradation met in this process (a copy; empty
        when every time lay within the bundled tables).
    """
    return list(_notes)


def _note_for(warning: warnings.WarningMessage) -> str | None:
    """The note a captured warning stands for, or None if it is not a known one."""
    names = {cls.__name__ for cls in warning.category.__mro__}
    text = str(warning.message)
    for category, fragment, note in _KNOWN_WARNINGS:
        if category in names and fragment in text:
            return note
    return None


@contextmanager
def degraded_accuracy_as_notes() -> Iterator[None]:
    """Run astropy code with its known degraded-accuracy warnings recorded as notes.

    Inside the block every warning is captured (whatever filters are active, so even
    ``-W error`` cannot turn them into exceptions). On leaving, each known warning adds
    its note once to :func:`offline_notes`; any other warning is re-issued unchanged.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    for warning in caught:
        note = _note_for(warning)
        if note is None:
            warnings.warn_explicit(
                warning.message, warning.category, warning.filename, warning.lineno
            )
        elif note not in _notes:
            _notes.append(note)
