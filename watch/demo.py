"""The bundled demo: an invented site watched through an invented wet season."""

from __future__ import annotations

from pathlib import Path
from typing import Callable

from watch.caution import CAUTION


def run_demo(workspace: Path, echo: Callable[[str], None] = print) -> None:
    """Build ``workspace`` from the bundled demo and run every stage that exists so far."""
    echo(f"slipwatch demo: workspace {workspace}")
    echo("(the demo grows with each stage of the job; see README 'What the demo shows')")
    echo(CAUTION)
