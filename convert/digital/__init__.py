"""Digital (sampled) controllers: analog -> digital methods, digital -> analog, structures,
word formats and code emission."""
