"""Science core: pure, vectorised functions with units in every name or docstring.

No module in this package reads files or touches GIS data.
"""
