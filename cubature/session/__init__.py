"""The session layer: what both front ends (the command line and the text UI) share -- run directories, the
progress-log records, results and forecasts."""
