"""dbmetrics benchmark: `python -m bench --help`; see bench/README.md."""
