"""loopshift: move a feedback controller between its analog, digital and op-amp circuit forms.

The package computes; the command-line interface (``convert.cli``) and the report writers
(``convert.report``) only arrange the computations. Importing ``convert`` loads neither
matplotlib nor python-control (nor numpy): each name below is imported the first time it is
used.

The three jobs from Python (docs/python.md has each in a few lines):

>>> import convert
>>> pi = convert.from_expression("2*(1 + 1/(30*s))")
>>> firmware = convert.discretize(pi, 10.0, "tustin")
>>> [round(x, 6) for x in firmware.controller.b], [round(x, 6) for x in firmware.controller.a]
([2.003333, -1.996667], [1.0, -1.0])
"""

from convert.errors import InputError, LoopshiftError, UnrealizableError

__version__ = "0.1.0"

# public name -> (module, attribute); imported on first use (PEP 562) to keep start-up light
_LAZY = {
    # the canonical controller and how to read one
    "Controller": ("convert.controller", "Controller"),
    "from_expression": ("convert.controller", "from_expression"),
    "PidSettings": ("convert.pid", "PidSettings"),
    "pid_from_words": ("convert.pid", "pid_from_words"),
    "pid_from_controller": ("convert.pid", "pid_from_controller"),
    "read_card": ("convert.api", "read_card"),
    # analog <-> digital
    "METHODS": ("convert.methods", "METHODS"),
    "discretize": ("convert.digital.realization", "discretize"),
    "to_analog": ("convert.digital.inverse", "to_analog"),
    "read_analog": ("convert.digital.inverse", "read_analog"),
    "survey_methods": ("convert.digital.survey", "survey_methods"),
    # controller -> op-amp circuit
    "DesignOptions": ("convert.circuit.design", "DesignOptions"),
    "design_circuit": ("convert.circuit.design", "design_circuit"),
    # cases, evaluation, reports
    "Case": ("convert.case", "Case"),
    "load_case": ("convert.case", "load_case"),
    "case_from_dict": ("convert.case", "case_from_dict"),
    "evaluate": ("convert.api", "evaluate"),
    # the pipeline: one run from a case to a verdict, as typed results
    "run_pipeline": ("convert.pipeline", "run_pipeline"),
    "PipelineResult": ("convert.pipeline", "PipelineResult"),
    "AnalogSource": ("convert.pipeline", "AnalogSource"),
    "PidSource": ("convert.pipeline", "PidSource"),
    "DigitalSource": ("convert.pipeline", "DigitalSource"),
    "CardSource": ("convert.pipeline", "CardSource"),
    "DigitalResult": ("convert.pipeline", "DigitalResult"),
    "CircuitResult": ("convert.pipeline", "CircuitResult"),
    "GivenResult": ("convert.pipeline", "GivenResult"),
    "LoopCheck": ("convert.pipeline", "LoopCheck"),
    "BudgetRow": ("convert.compare.budget", "BudgetRow"),
    "Verdict": ("convert.compare.verdict", "Verdict"),
    "write_report": ("convert.report", "write_report"),
    "run_batch": ("convert.report.batch", "run_batch"),
    # forms that exist, and the evidence about them
    "read_spec": ("convert.given", "read_spec"),
    "compare_pair": ("convert.compare.pair", "compare_pair"),
    "read_sweep": ("convert.evidence.sweep", "read_sweep"),
    "sweep_evidence": ("convert.evidence.sweep", "sweep_evidence"),
    "log_evidence": ("convert.evidence.log", "log_evidence"),
}

__all__ = ["LoopshiftError", "InputError", "UnrealizableError", "__version__", *_LAZY]


def __getattr__(name: str):
    try:
        module, attribute = _LAZY[name]
    except KeyError:
        raise AttributeError(f"module 'convert' has no attribute {name!r}") from None
    import importlib

    value = getattr(importlib.import_module(module), attribute)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
