"""Loop tuning on the python-control library: plants, published rules, analysis."""
