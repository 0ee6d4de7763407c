"""The naming policy for generated C: every identifier and every comment that carries user text
is made here, so a model's names can never clash with C or break out of a comment."""

from __future__ import annotations

import re

C_KEYWORDS = frozenset("""
auto break case char const continue default do double else enum extern float for goto if inline
int long register restrict return short signed sizeof static struct switch typedef union unsigned
void volatile while _Bool _Complex _Imaginary bool true false NULL main
""".split())


def identifier(name: str) -> str:
    """A safe C identifier for a model name: letters, digits, underscores; keywords escaped."""
    text = re.sub(r"[^A-Za-z0-9_]", "_", name)
    if not text or not text[0].isalpha():
        text = "m_" + text
    text = re.sub(r"_+", "_", text)
    return text + "_" if text in C_KEYWORDS else text


def comment_text(text: str) -> str:
    """User text made safe inside a /* */ comment: one line, no comment ends, no trigraphs."""
    text = " ".join(str(text).split())
    text = text.replace("*/", "* /").replace("/*", "/ *").replace("??", "? ?")
    return "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in text)


class CNames:
    """Every C name the generator uses for one model."""

    def __init__(self, model_name: str) -> None:
        self.prefix = identifier(model_name).lower().rstrip("_")
        self.macro_prefix = self.prefix.upper()

    @property
    def header(self) -> str:
        return f"{self.prefix}.h"

    @property
    def source(self) -> str:
        return f"{self.prefix}.c"

    @property
    def guard(self) -> str:
        return f"{self.macro_prefix}_H_INCLUDED"

    @property
    def trace_header(self) -> str:
        """The verification-only pair that holds the traced step (never shipped)."""
        return f"{self.prefix}_trace.h"

    @property
    def trace_source(self) -> str:
        return f"{self.prefix}_trace.c"

    @property
    def trace_guard(self) -> str:
        return f"{self.macro_prefix}_TRACE_H_INCLUDED"

    @property
    def state_type(self) -> str:
        return f"{self.prefix}_state_t"

    @property
    def init(self) -> str:
        return f"{self.prefix}_init"

    @property
    def step(self) -> str:
        return f"{self.prefix}_step"

    @property
    def step_traced(self) -> str:
        return f"{self.prefix}_step_traced"

    def setter(self, parameter: str) -> str:
        return f"{self.prefix}_set_{identifier(parameter)}"

    def macro(self, name: str) -> str:
        return f"{self.macro_prefix}_{identifier(name).upper()}"

    def field(self, state_name: str) -> str:
        return identifier(state_name)
