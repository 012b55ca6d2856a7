"""The one exception type for user mistakes.

An ``InputError`` message names the file, line, taxon, trait or config key that
is wrong and says what to do about it. Scripts and the command line print the
message alone (no traceback) and exit with status 2.
"""


class InputError(Exception):
    """Bad input from the user: a file, a table cell, a tree or a config value."""
