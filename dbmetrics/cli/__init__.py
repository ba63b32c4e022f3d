"""The ``dbmetrics`` command line: run saved queries and ad-hoc SQL, write their results."""
