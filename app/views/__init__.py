"""One module per view of the dashboard, plus the shared access to the core's results."""
