"""ndrigid demo: pygame scenes in 2-D to 5-D built only on the public API.

Run ``python -m ndrigid.demo --dim 4 --scene rockfall`` (keys: H in the window), or headless
``python -m ndrigid.demo --headless --frames 120 --out frames``. Scenes live in :mod:`.scenes`
(a registry by name), colours in :mod:`.palette`, the window and views in :mod:`.app`, and the
layer over the esper adapter in :mod:`.world`. pygame is imported only when the app starts.
"""

from __future__ import annotations

__all__ = ["main", "run_headless"]


def main(argv: list[str] | None = None) -> int:
    """Entry point of ``python -m ndrigid.demo`` (see ``--help``)."""
    from .app import main as _main

    return _main(argv)


def run_headless(*args: object, **kwargs: object) -> dict:
    """Render frames off-screen (see :func:`ndrigid.demo.app.run_headless`)."""
    from .app import run_headless as _run

    return _run(*args, **kwargs)  # type: ignore[arg-type]
