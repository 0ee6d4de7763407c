"""The naming policy for generated C: every identifier and every comment that carries user text
is made here, so a model's names can never clash with C or break out of a comment."""

from __future__ import annotations

import re
from collections.abc import Sequence

from orbitfix.gen.errors import InputError

NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_]*", re.ASCII)
LONGEST_NAME = 40  # well inside C99's 63 significant characters once a prefix is added

# Keywords of C99, C11, C23 and C++20, and the GNU keywords that gcc and clang accept without
# underscores in their default modes (common practice: the standards' keyword tables).
C_KEYWORDS = frozenset("""
auto break case char const continue default do double else enum extern float for goto if inline
int long register restrict return short signed sizeof static struct switch typedef union unsigned
void volatile while _Bool _Complex _Imaginary _Alignas _Alignof _Atomic _Generic _Noreturn
_Static_assert _Thread_local alignas alignof bool constexpr false nullptr static_assert
thread_local true typeof typeof_unqual _BitInt _Decimal32 _Decimal64 _Decimal128
""".split())
CPP_KEYWORDS = frozenset("""
and and_eq asm bitand bitor catch char8_t char16_t char32_t class compl concept consteval
constinit const_cast co_await co_return co_yield decltype delete dynamic_cast explicit export
final friend import module mutable namespace new noexcept not not_eq operator or or_eq override
private protected public reinterpret_cast requires static_cast template this throw try typeid
typename using virtual wchar_t xor xor_eq
""".split())
# Plain names that gcc or clang predefine as macros on some target in their GNU modes (gcc's
# manual, "System-specific Predefined Macros"; the list of targets from memory), and that avr-gcc
# predefines (from memory).
COMPILER_MACROS = frozenset("""
linux unix i386 sun sparc mips vax hppa m68k mc68000 ns32000 pdp11 pyr sequent AVR main
""".split())
# Names the C library defines as macros or types in headers that the firmware, the host harness
# or the cffi build (through Python.h) include: <stdint.h>, <stddef.h>, <stdbool.h>, <limits.h>,
# <errno.h>, <assert.h>, <stdio.h>, <stdlib.h>, <math.h>, <complex.h>, <setjmp.h>, <stdarg.h>
# (common practice: the C standard's library clauses). Patterns below catch the families.
LIBRARY_NAMES = frozenset("""
NULL offsetof errno assert EOF BUFSIZ FILENAME_MAX FOPEN_MAX TMP_MAX L_tmpnam SEEK_SET SEEK_CUR
SEEK_END stdin stdout stderr EXIT_SUCCESS EXIT_FAILURE RAND_MAX MB_CUR_MAX CHAR_BIT MB_LEN_MAX
HUGE_VAL HUGE_VALF HUGE_VALL INFINITY NAN complex imaginary noreturn setjmp longjmp va_arg
va_start va_end va_copy va_list CLOCKS_PER_SEC NDEBUG
""".split())
LIBRARY_PATTERNS = (
    (re.compile(r".*_t", re.ASCII), "names ending in _t are the types of <stdint.h> and "
                                     "<stddef.h> (int32_t, size_t) and are reserved by POSIX"),
    (re.compile(r"[A-Z0-9_]+_(MAX|MIN|C|WIDTH)", re.ASCII),
     "the form of the limit macros of <stdint.h> and <limits.h> (INT32_MAX, SIZE_MAX, INT8_C)"),
    (re.compile(r"E[0-9A-Z][0-9A-Z_]*", re.ASCII), "the form of the <errno.h> macros (EDOM, "
                                                   "ERANGE)"),
    (re.compile(r"(PRI|SCN)[a-zA-Z0-9]+", re.ASCII), "the form of the <inttypes.h> macros"),
    (re.compile(r"(SIG|SIG_|LC_|FE_|FLT_|DBL_|LDBL_|Py|PY)[A-Z_].*", re.ASCII),
     "the form of macros of <signal.h>, <locale.h>, <fenv.h>, <float.h> or Python.h"),
    (re.compile(r"M_[A-Z0-9_]+|(HAVE|SIZEOF|WITH|ALIGNOF|DOUBLE_IS)_[A-Z0-9_]+|"
                r"(BIG|LITTLE|PDP)_ENDIAN|BYTE_ORDER", re.ASCII),
     "the form of macros that <math.h>, <endian.h> or Python's pyconfig.h define in the host "
     "build (M_PI, HAVE_UNISTD_H, SIZEOF_INT, BIG_ENDIAN; from memory)"),
    (re.compile(r".*__.*", re.ASCII), "a double underscore is reserved in C++"),
    (re.compile(r"orbitfix.*", re.ASCII | re.IGNORECASE),
     "the prefix orbitfix is the generator's own (harness functions, build modules)"),
)
# Standard and common system headers: a model's files are NAME.h and NAME.c, and a NAME.h beside
# the code would be found before the system's <NAME.h>. Compared ignoring case, since some file
# systems do.
SYSTEM_HEADERS = frozenset("""
assert complex ctype errno fenv float inttypes iso646 limits locale math setjmp signal stdalign
stdarg stdatomic stdbit stdbool stdckdint stddef stdint stdio stdlib stdnoreturn string tgmath
threads time uchar wchar wctype unistd fcntl pthread sched semaphore strings syslog termios
dirent dlfcn poll python pyconfig arm_math cmsis_compiler cmsis_gcc windows
""".split())


def name_problem(name: object) -> str | None:
    """Why ``name`` cannot be a model, state or parameter name in the generated C on any of our
    targets, or None when it can. The policy refuses rather than escapes: an escaped name can
    collide with another (``int`` beside ``int_``) and no longer matches what the user wrote."""
    if not isinstance(name, str) or not NAME_PATTERN.fullmatch(name):
        return ("a name must be a plain ASCII identifier: a letter, then letters, digits or "
                "underscores, with no spaces or line breaks")
    if len(name) > LONGEST_NAME:
        return f"a name may have at most {LONGEST_NAME} characters"
    if name in C_KEYWORDS:
        return "it is a C keyword"
    if name in CPP_KEYWORDS:
        return "it is a C++ keyword (the C may be built by a C++ compiler)"
    if name in COMPILER_MACROS:
        return "gcc or clang predefine it as a macro on some targets (or it is C's entry point)"
    if name in LIBRARY_NAMES:
        return "the C library defines it as a macro or function the generated code can see"
    for pattern, reason in LIBRARY_PATTERNS:
        if pattern.fullmatch(name):
            return f"it has {reason}" if reason.startswith("the ") else reason
    return None


def check_names(model_name: str, states: Sequence[str], parameters: Sequence[str],
                runtime: Sequence[str] = (), outputs: Sequence[str] = ()) -> None:
    """Refuse, with the reason, every name of a model that is not safe in its generated C: the
    model's own name, its states', parameters' and outputs' names, and the names made from them
    (the fields for runtime parameters' targets, the macros in capitals, the header guard)."""
    problem = name_problem(model_name)
    if problem is None and model_name.lower() in SYSTEM_HEADERS:
        problem = (f"the model's files would be {model_name.lower()}.h and "
                   f"{model_name.lower()}.c, and that header would hide the system's "
                   f"<{model_name.lower()}.h>")
    if problem:
        raise InputError(f"model name {model_name!r} cannot be used: {problem}; choose another "
                         "name")
    names = CNames(model_name)
    made = {f"{p}_target": p for p in runtime}
    reserved = {names.saturation_field: "the count of saturated steps"}
    seen: dict[str, str] = {}
    for name in [*states, *parameters, *outputs]:
        problem = name_problem(name)
        if problem is None and name.upper().startswith(names.macro_prefix + "_"):
            problem = (f"it starts with {names.macro_prefix}_, the prefix of the macros made for "
                       f"model '{model_name}' (such as its header guard {names.guard})")
        if problem is None and name in reserved and (name in states or name in runtime
                                                     or name in outputs):
            problem = f"the generated state already has a field {name} for {reserved[name]}"
        if problem is None and name in made:
            problem = (f"the generated state already has a field {name} for the target of the "
                       f"runtime parameter '{made[name]}'")
        if problem is None and name in runtime and name.upper() in seen:
            problem = (f"it differs from the runtime parameter '{seen[name.upper()]}' only in "
                       "capitals, and each runtime parameter's macro is made in capitals")
        if problem:
            if name in outputs:
                raise InputError(f"model '{model_name}', [outputs] '{name}': it cannot be an "
                                 f"output name: {problem}; rename it")
            raise InputError(f"model '{model_name}': {name!r} cannot be a state or parameter name: "
                             f"{problem}; rename it")
        if name in runtime:
            seen[name.upper()] = name


def identifier(name: str) -> str:
    """The C identifier of a model name: the name itself, which the policy has accepted (an
    unsafe name is an input error, never escaped)."""
    problem = name_problem(name)
    if problem:
        raise InputError(f"{name!r} cannot be used as a name in C: {problem}")
    return name


def comment_text(text: str) -> str:
    """User text made safe inside a /* */ comment: one line, no comment ends, no trigraphs."""
    text = " ".join(str(text).split())
    text = text.replace("*/", "* /").replace("/*", "/ *").replace("??", "? ?")
    return "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in text)


class CNames:
    """Every C name the generator uses for one model."""

    def __init__(self, model_name: str) -> None:
        self.prefix = identifier(model_name).lower()
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
    def units_header(self) -> str:
        """Macros between real values and stored integers (floating point: kept out of NAME.h)."""
        return f"{self.prefix}_units.h"

    @property
    def units_guard(self) -> str:
        return f"{self.macro_prefix}_UNITS_H_INCLUDED"

    @property
    def selftest_header(self) -> str:
        """The self-test pair: the first steps' expected states, checked on the target."""
        return f"{self.prefix}_selftest.h"

    @property
    def selftest_source(self) -> str:
        return f"{self.prefix}_selftest.c"

    @property
    def selftest_guard(self) -> str:
        return f"{self.macro_prefix}_SELFTEST_H_INCLUDED"

    @property
    def selftest(self) -> str:
        return f"{self.prefix}_selftest"

    @property
    def example_source(self) -> str:
        """The example firmware entry point: a timer interrupt calls the step at the loop rate."""
        return f"{self.prefix}_example_main.c"

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

    @property
    def saturation_field(self) -> str:
        """The state struct's field that counts saturated steps (a name no model may use)."""
        return "saturated_steps"

    def setter(self, parameter: str) -> str:
        return f"{self.prefix}_set_{identifier(parameter)}"

    def macro(self, name: str) -> str:
        return f"{self.macro_prefix}_{identifier(name).upper()}"

    def field(self, state_name: str) -> str:
        return identifier(state_name)
