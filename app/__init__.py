"""loopkit's desktop app (PySide6 + pyqtgraph).

The app draws and forwards user actions; every number it shows comes from the
same loopkit path the command line uses (:class:`loopkit.loop.LoopSession`).
Start it with ``loopkit-gui [FILE]`` (:func:`app.main.main`).
"""

__all__: list[str] = []
