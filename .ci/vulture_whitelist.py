"""Names vulture cannot see used (run: ``vulture convert tests bench .ci/vulture_whitelist.py``).

Only two kinds belong here: what the public API exports or returns (``convert.__all__``, reached
through the lazy table in ``convert/__init__.py``, and the fields of the result objects a caller
reads), and names that a library calls by name (module hooks, overridden methods, attributes a
library reads). Anything else vulture reports is dead: delete it.
"""

# ruff: noqa: B018  (bare names: each line tells vulture the name is used)
from convert import _LAZY
from convert.api import read_card
from convert.case import Criteria
from convert.circuit.tolerance import WorstCase
from convert.digital.fixedpoint import Realized
from convert.digital.quantized import FormatAnalysis
from convert.digital.wordformats import WordFormat
from convert.pipeline import CardSource
from convert.report.batch import CaseOutcome

# --- the public API: convert.__all__, imported on first use (PEP 562 hooks, names as strings)
_LAZY
read_card  # convert.read_card -> convert.api.read_card (only named in _LAZY)

# module hooks Python calls by name (PEP 562)
__getattr__  # noqa: F821 - convert.__getattr__
__dir__  # noqa: F821 - convert.__dir__

# --- fields of result objects the public API returns (read by callers, not inside the package)
Criteria.max_gain_margin_change_db  # read by name from the criterion tables (compare/verdict.py, compare/evaluate.py)
Criteria.max_sensitivity_peak_change_db
Criteria.max_disturbance_deviation
CaseOutcome.worst_realization  # convert.run_batch -> BatchResult.outcomes
CardSource.handed_on  # convert.CardSource: the controller the targets are built from
WorstCase.sensitivity_deg  # beside sensitivity_db: the phase half of the per-part sensitivity
FormatAnalysis.coefficient_error  # word-format analysis of a realization (loopshift digital --word-format)
FormatAnalysis.error_at_hz
FormatAnalysis.node_bounds
FormatAnalysis.limit_cycle
Realized.node_bounds
WordFormat.mantissa_bits  # the float formats' significand width, part of the Realized.word a realization carries

# --- called by a library by name
_.on_broken_pipe  # noqa: F821 - rich.console.Console calls it when stdout's reader goes away
_._negative_number_matcher  # noqa: F821 - argparse reads it to tell "-3" from an option
_.formatwarning  # noqa: F821 - warnings.formatwarning, replaced for one-line warnings
_.handle_starttag  # noqa: F821 - html.parser.HTMLParser callbacks (tests' HTML probes)
_.handle_data  # noqa: F821
_.handle_comment  # noqa: F821
_._ngspice  # noqa: F821 - an autouse pytest fixture (tests/test_mna_ngspice.py)
_.writeable  # noqa: F821 - numpy reads ndarray.flags.writeable (read-only cached arrays)
