"""Small families of runs that answer one question each (e.g. speed against duty)."""
