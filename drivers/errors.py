"""Named hardware-layer errors. Imports only ``app.errors`` (the shared base)."""

from __future__ import annotations

from app.errors import FlamebodeError


class DriverError(FlamebodeError):
    """A back-end failed; the message names the back-end and what it was doing."""


class CeilingExceeded(DriverError):
    """A drive request above the voltage ceiling was refused (never clipped)."""


class BackendTimeout(DriverError):
    """The instrument or acquisition did not answer in time."""


class BackendUnavailable(DriverError):
    """The back-end's library, vendor runtime or device is missing."""


class DriveHalted(DriverError):
    """A drive request after an emergency halt: the output stays at zero until a new sweep re-arms it."""
