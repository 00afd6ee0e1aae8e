"""Rig emulator: the simulated burner's physics behind real I/O, as a separate process.

``python -m drivers.emulator audio ...`` listens to the drive on an audio server (the monitor
of one null sink), runs the simulated burner on the drive it *receives*, in real time, and
plays the pressures, the light and the drive reference into another null sink whose monitor
is flamebode's input. (The SCPI path needs no process of its own: ``scpi+simulated``
already feeds the generator's read-back settings to the same physics; the tests serve the
loopback SCPI generator, tests/drivers/scpi_emulator.py, as a separate process.) What the emulator applies
(its true FTF at the frequencies it was driven at) goes to a truth file that only tests read;
what it received (drive level, counts, audio-server events) goes to a status file.

Modules: ``physics`` (the burner on a received drive), ``audio`` (the audio loop),
``files`` (truth and status files), ``__main__`` (the command line).

Imports: numpy, ``app.rig``, ``drivers.simulated``, ``drivers.soundcard`` (its rig table) and
``sounddevice`` (lazily, in ``audio``).
Never Qt, the engine, storage or the measurement estimators (``app.core.harmonic``,
``multimic``, ``response``, ``quality``): the frequency of the received drive comes from a
zero-crossing count written here.
"""
