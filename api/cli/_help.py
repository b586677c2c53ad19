"""Help text for people: what each option takes in words (``NUMBER``, ``FILE``, ``TEXT``), never a
Python type (``<bool>``, ``<list[str]>``); docstrings without reStructuredText markup and with
their paragraphs rewrapped to the terminal."""

from __future__ import annotations

import re
from pathlib import PurePath
from typing import Any, get_args

__all__ = ["plain_help"]

_ROLE = re.compile(r":[a-z]+:`~?([^`]+)`")  # :func:`beamaudit.x.y` -> y
_LITERAL = re.compile(r"``([^`]+)``")


def _text(help_text: str | None) -> str | None:
    """One docstring as help: roles and double backticks gone, each paragraph on one line."""
    if not help_text:
        return help_text
    text = _ROLE.sub(lambda m: m.group(1).rsplit(".", 1)[-1], help_text)
    text = _LITERAL.sub(r"\1", text)
    paragraphs = re.split(r"\n\s*\n", text.strip())
    return "\n\n".join(" ".join(p.split()) for p in paragraphs)


_WORDS = {bool: "", int: "NUMBER", float: "NUMBER", str: "TEXT"}


def _metavar(param: Any) -> str:
    """What an option or argument takes, in words ("" for a flag)."""
    if getattr(param, "is_flag", False) or getattr(param, "count", False):
        return ""
    desc = getattr(param, "type_descriptor", None)
    kind = getattr(param, "type", None)
    if desc is not None:
        annotation = desc.annotation
        inner = get_args(annotation)
        base = inner[0] if desc.is_list and inner else annotation
        if desc.is_choice:
            words = "|".join(str(getattr(c, "value", c)) for c in desc.choices or ())
        elif desc.is_path:
            words = {"file": "FILE", "dir": "FOLDER", "directory": "FOLDER"}.get(
                str(desc.path_type).lower(), "PATH"
            )
        elif desc.is_datetime:
            words = "DATE"
        elif desc.is_ranged:
            words = "NUMBER"
        else:
            words = _WORDS.get(base, "TEXT") if isinstance(base, type) else "TEXT"
            if isinstance(base, type) and issubclass(base, PurePath):
                words = "PATH"
    elif choices := getattr(kind, "choices", None):
        words = "|".join(str(c) for c in choices)
    else:
        words = "TEXT"
    return words + ("..." if param.nargs == -1 and words else "")


def plain_help(command: Any) -> Any:
    """``command`` and every subcommand with plain help (changed in place; returned)."""
    command.help = _text(command.help)
    if command.short_help:
        command.short_help = _text(command.short_help)
    for param in command.params:
        if param.param_type_name == "argument":  # its metavar is its name: only the type column
            words = _metavar(param)
            param.display_type_rich = lambda ctx, words=words: words
        elif param.metavar is None:
            param.metavar = _metavar(param)
        if getattr(param, "help", None):
            param.help = _text(param.help)
    help_option = command.get_help_option

    def get_help_option(ctx: Any) -> Any:  # made afresh for each context: a flag, no metavar
        option = help_option(ctx)
        if option is not None and option.metavar is None:
            option.metavar = ""
        return option

    command.get_help_option = get_help_option
    for sub in (getattr(command, "commands", None) or {}).values():
        plain_help(sub)
    return command
