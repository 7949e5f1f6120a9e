"""Evidence: measurements of a form as it exists (a bench sweep, a plant log), read from CSV and
compared with the models of the forms; fitting the values that matter from them.

Modules: ``csvtable`` (headers, units, chunked numbers), ``sweep`` (frequency-response
measurements), ``models`` (a form's response as a function of its parts or PID parameters),
``fit`` (weighted least squares, what the data determines, single-part explanations),
``log`` (plant logs: replay and residuals).
"""
