"""Exporters: leaves of the data flow.  Each module has a pure
``to_<format>(...) -> str`` and writes nothing itself."""
