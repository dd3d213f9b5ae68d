"""The ``refdb`` command line: argument parsing and rendering only, no physics."""
