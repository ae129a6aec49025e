"""Pure planning arithmetic: spares per pump kind, shutdown windows that suit each forecast, the outlook of a
horizon. Data in, numbers out: no database, no web."""
