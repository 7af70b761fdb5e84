"""The engine: owns the link, runs the loop at the device's pace, supervises, records.

Nothing here imports Qt; front ends (the CLI's ``run`` and the desktop app) drive the same
:class:`~rigloop.engine.loop.Engine`, in-process or in a child process (:mod:`.process`).
"""
