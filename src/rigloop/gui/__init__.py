"""The desktop app (PyQt6 + pyqtgraph): a client of an engine process, never the loop itself.

This package is the only place in rigloop that imports Qt. The window starts an engine process
through :class:`rigloop.engine.process.EngineClient`, reads its telemetry ring and status block,
and sends it requests (e-stop, arm, tuning). Entry point: :func:`rigloop.gui.app.run_gui`.
"""
