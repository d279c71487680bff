"""The bundled demo: an invented site watched through an invented wet season."""

from __future__ import annotations

from pathlib import Path
from typing import Callable

CAUTION = (
    "Caution: factors of safety are decision support only. They depend on the model and its "
    "inputs and do not replace a qualified engineer's judgement or local codes."
)


def run_demo(workspace: Path, echo: Callable[[str], None] = print) -> None:
    """Build ``workspace`` from the bundled demo and run every stage that exists so far."""
    echo(f"slipwatch demo: workspace {workspace}")
    echo("(the demo grows with each stage of the job; see README 'What the demo shows')")
    echo(CAUTION)
