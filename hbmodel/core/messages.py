"""One-line messages from exceptions and free text, for the command line's one-line errors and the
batch summary's ``reason`` column (issue 14: one helper instead of a copy per module)."""
from __future__ import annotations


def first_line(obj) -> str:
    """The first line of ``str(obj)`` with surrounding blanks removed ('' when it has no text)."""
    text = str(obj).strip()
    return text.splitlines()[0].strip() if text else ""


def compact(text, limit: int = 300) -> str:
    """``text`` on one line (every run of whitespace, newlines included, made one space), cut to
    ``limit`` characters with a trailing '...' when longer."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def describe_exception(exc: BaseException) -> str:
    """'TypeName: first line of the message', or the type name alone when the message is empty."""
    first = first_line(exc)
    return f"{type(exc).__name__}: {first}" if first else type(exc).__name__
