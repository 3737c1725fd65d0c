"""Check and flag: assumption tests, influence, collinearity and robust errors; verdicts adjusted across groups."""
