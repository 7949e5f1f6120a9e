"""Digital (sampled) controllers: analog -> digital methods, digital -> analog, structures,
word formats and code emission.

Exports: ``METHODS``, ``discretize``, ``DigitalRealization``,
``difference_equation``, ``INVERSE_METHODS``, ``to_analog``, ``read_analog``, ``add_derivative_filter``,
``survey_methods``.
"""

from convert.digital.realization import METHODS, DigitalRealization, difference_equation, discretize  # noqa: F401
from convert.digital.inverse import INVERSE_METHODS, AnalogReading, read_analog, to_analog  # noqa: F401
from convert.digital.derivative_filter import add_derivative_filter, derivative_filter_time_constant  # noqa: F401
from convert.digital.survey import MethodRow, MethodSurvey, survey_methods  # noqa: F401
