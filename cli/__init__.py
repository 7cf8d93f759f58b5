"""segcut's command-line front end (installed as package ``segcut_cli``).

It parses arguments, calls engine functions with explicit keywords and maps errors
to exit codes; all computation lives in the ``segcut`` engine.
"""
