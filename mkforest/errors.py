"""The one exception type for user mistakes.

An ``InputError`` message names the file, line, taxon, trait or config key that
is wrong and says what to do about it. Scripts and the command line print the
message alone (no traceback) and exit with status 2.
"""


class InputError(Exception):
    """Bad input from the user: a file, a table cell, a tree or a config value."""


def did_you_mean(word, choices, quote: bool = True) -> str:
    """' Did you mean 'x'?' for the closest of ``choices`` (difflib), or ''.

    Meant to end a sentence about a misspelt key, trait, model or state label.
    """
    import difflib

    options = [str(c) for c in choices]
    close = difflib.get_close_matches(str(word), options, n=1, cutoff=0.6)
    if not close:
        lowered = {o.lower(): o for o in options}
        close = [lowered[str(word).lower()]] if str(word).lower() in lowered else []
    if not close:
        return ""
    shown = " or ".join(f"'{c}'" if quote else c for c in close)
    return f" Did you mean {shown}?"


def join_problems(problems: list) -> str:
    """One InputError message for several mistakes: one sentence per line."""
    return "\n".join(problems)
