"""loopkit: design and verify the feedback loop of switching DC-DC converters.

Pure computation (numpy, scipy); never imports Qt.  The path from a design to
its results: :func:`load_design` -> :func:`analyse_stage` -> compensator ->
loop gain per corner -> margins, warnings -> exports.
"""

from .design import Design
from .designfile import dumps_design, load_design, loads_design, save_design
from .errors import DesignError, DesignFileError, Finding
from .powerstage import StageResult, analyse_stage
from .rational import Rational
from .units import format_value, parse_value

__all__ = [
    "Design",
    "DesignError",
    "DesignFileError",
    "Finding",
    "Rational",
    "StageResult",
    "analyse_stage",
    "dumps_design",
    "format_value",
    "load_design",
    "loads_design",
    "parse_value",
    "save_design",
]

__version__ = "0.1.0"
