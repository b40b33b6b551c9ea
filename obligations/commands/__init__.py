"""The ``calcscout`` command line and the commands that work from saved reports."""
