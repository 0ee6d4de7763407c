"""Networks as loops: the repeats of a planned integer program (the same work once per
oscillator, ``IntegerProgram.repeats``) written as one C loop over the oscillators.

A value some other copy, another part of the step or the next state reads is kept in an array
indexed by oscillator; a value only its own copy reads is a local of the loop's body. A copy's
argument from another repeat is that array at the same oscillator or a fixed number of
oscillators on (modulo the count). A stored constant that differs between the copies (a
coupling's number) becomes a ``static const`` table indexed by oscillator, in flash on AVR. A
repeat becomes a loop only when every copy's C line, written with the loop's names, is the same
text, position by position; else its copies are written out one by one into the same arrays.
Nothing here decides arithmetic: every line is the operation's own C form
(``gen/c/emit.py``), only the names of its arguments and constants change.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field

from orbitfix.gen.c.naming import comment_text
from orbitfix.gen.program.integer_program import IntegerProgram
from orbitfix.gen.program.operations import int_literal, kind_of

LOOP_INDEX = "oscillator"

# render(index, arg_names, symbol or None) -> (C expression, comment) of one value's line
Render = Callable[[int, tuple[str, ...], str | None], tuple[str, str]]


@dataclass
class LoopedStep:
    """The firmware step's value lines with its repeats as loops.

    lines -- C lines (unindented) computing the kept values; value_name -- the C name of any
    value outside a loop's body (for the next state); tables -- per-oscillator constant tables
    (name, length, entries, stored integers, comment, and uses: per entry, the values whose
    constant it is); loops -- how many repeats became loops, of ``repeats``;
    routines -- static functions (name, parameters, lines) that loops of one routine call."""

    lines: list[str]
    value_name: Callable[[int], str]
    tables: list[dict] = field(default_factory=list)
    loops: int = 0
    repeats: int = 0
    routines: list[dict] = field(default_factory=list)


def looped_step(program: IntegerProgram, kept: set[int], render: Render,
                symbol_of: dict[int, str], stored: dict[int, tuple[int, int]],
                word_type: str, table_entry: str, prefix: str) -> LoopedStep | None:
    """The step's lines with each repeat as a loop where its copies' C agree. ``stored`` maps a
    value with a stored constant to (stored integer, its fraction bits); ``table_entry`` is the
    macro that reads a table entry (flash on AVR). None when the program has no repeats, or
    when a repeat reads a value made after its first operation (the copies cannot go together)."""
    repeats = program.repeats
    if not repeats:
        return None
    where: dict[int, tuple[int, int, int]] = {}
    for r, repeat in enumerate(repeats):
        for c, copy in enumerate(repeat):
            for p, index in enumerate(copy):
                where[index] = (r, c, p)
    starts = [min(min(copy) for copy in repeat) for repeat in repeats]
    for r, repeat in enumerate(repeats):
        for copy in repeat:
            for index in copy:
                if index in kept and any(a >= starts[r] and where.get(a, (None,))[0] != r
                                         for a in program.ops[index].args):
                    return None
    readers_outside: set[tuple[int, int]] = set()  # (repeat, position) read outside its copy
    for index in kept:
        mine = where.get(index)
        for a in program.ops[index].args:
            theirs = where.get(a)
            if theirs is not None and (mine is None or mine[:2] != theirs[:2]):
                readers_outside.add((theirs[0], theirs[2]))
    for value in program.next_state:
        if value in where:
            readers_outside.add((where[value][0], where[value][2]))

    def first_of(index: int) -> int:
        r, _, p = where[index]
        return repeats[r][0][p]

    def value_name(index: int) -> str:
        """A value's name outside any loop's body."""
        if index in where and (where[index][0], where[index][2]) in readers_outside:
            return f"v{first_of(index)}[{where[index][1]}]"
        return f"v{index}"

    def loop_name(index: int, r: int, c: int) -> str:
        """Argument ``index`` as copy ``c`` of repeat ``r`` reads it in the loop's body."""
        theirs = where.get(index)
        if theirs is None:
            return f"v{index}"
        count = len(repeats[r])
        rr, cc, p = theirs
        array = (rr, p) in readers_outside
        if rr == r and cc == c:
            return f"v{first_of(index)}[{LOOP_INDEX}]" if array else f"v{first_of(index)}"
        if len(repeats[rr]) != count:
            return f"v{first_of(index)}[{cc}]"  # never the same text in every copy
        on = (cc - c) % count
        at = LOOP_INDEX if on == 0 else f"({LOOP_INDEX} + {on}u) % {count}u"
        return f"v{first_of(index)}[{at}]"

    result = LoopedStep(lines=[], value_name=value_name, repeats=len(repeats))
    bodies = [_loop_body(program, repeat, r, kept, render, symbol_of, stored, loop_name,
                         readers_outside, word_type, table_entry, result.tables)
              for r, repeat in enumerate(repeats)]
    calls = _routine_calls(program, bodies, word_type, prefix, result)
    units: list[tuple[int | None, list[str], list[str]]] = []  # (repeat, declarations, code)
    emitted: set[int] = set()
    for index in range(len(program.ops)):
        if index not in kept or index in emitted:
            continue
        if index not in where:
            expression, note = render(index, tuple(value_name(a) for a in program.ops[index].args),
                                      None)
            units.append((None, [], [f"const {word_type} v{index} = {expression}; /* {note} */"]))
            continue
        r = where[index][0]
        repeat = repeats[r]
        emitted.update(i for copy in repeat for i in copy)
        declared = [f"{word_type} v{repeat[0][p]}[{len(repeat)}];" for p in range(len(repeat[0]))
                    if (r, p) in readers_outside and any(copy[p] in kept for copy in repeat)]
        code: list[str] = []
        units.append((r, declared, code))
        if r in calls:
            result.loops += 1
            code.append(calls[r])
            continue
        if bodies[r] is not None:
            result.loops += 1
            code.append(f"for (unsigned int {LOOP_INDEX} = 0u; {LOOP_INDEX} < "
                        f"{len(repeat)}u; {LOOP_INDEX}++) {{")
            code += [f"    {line}" for line in bodies[r]]
            code.append("}")
            continue
        for c, copy in enumerate(repeat):  # written out, copy by copy, into the same arrays
            for p, i in enumerate(copy):
                if i not in kept:
                    continue
                expression, note = render(i, tuple(value_name(a) for a in program.ops[i].args),
                                          None)
                if (r, p) in readers_outside:
                    code.append(f"v{repeat[0][p]}[{c}] = {expression}; /* {note} */")
                else:
                    code.append(f"const {word_type} v{i} = {expression}; /* {note} */")
    result.lines = _scoped(units, _array_readers(program, kept, where, readers_outside))
    return result


def _array_readers(program: IntegerProgram, kept: set[int], where: dict,
                   readers_outside: set) -> dict[int, set]:
    """Per repeat, who reads its arrays: other repeats (by number), a single value (its index as
    a string) or the next state ("next")."""
    readers: dict[int, set] = {}
    for index in kept:
        for a in program.ops[index].args:
            if a in where and (where[a][0], where[a][2]) in readers_outside:
                reader = where[index][0] if index in where else str(index)
                if reader != where[a][0]:
                    readers.setdefault(where[a][0], set()).add(reader)
    for value in program.next_state:
        if value in where:
            readers.setdefault(where[value][0], set()).add("next")
    return readers


def _scoped(units: list, readers: dict[int, set]) -> list[str]:
    """The units' lines in order; a repeat whose arrays only the next repeat reads (a stage's
    point, read by that stage's rates) goes with that next repeat in a block of its own, so that
    the compiler can give one stack slot to the arrays of every stage in turn."""
    lines: list[str] = []
    k = 0
    while k < len(units):
        r, declared, code = units[k]
        following = units[k + 1] if k + 1 < len(units) else (None, [], [])
        if r is not None and declared and following[0] is not None and readers.get(r) == {
                following[0]}:
            lines += following[1]
            lines.append("{")
            lines += [f"    {line}" for line in [*declared, *code, *following[2]]]
            lines.append("}")
            k += 2
            continue
        lines += declared + code
        k += 1
    return lines


_VALUE = re.compile(r"\bv(\d+)\b(\[)?")
_COMMENT = re.compile(r" /\*.*\*/$")  # a line's comment: the copies' notes name their stage
_STAGE = re.compile(r"stage \d+:")


def _routine_calls(program: IntegerProgram, bodies: list, word_type: str, prefix: str,
                   result: LoopedStep) -> dict[int, str]:
    """Two or more repeats of one routine (``IntegerProgram.routines``) that became loops whose
    bodies are the same text once their values are named by role (the body's own values t0,
    t1, ...; the arrays it writes out0, ...; the arrays it reads in0, ...; the single values it
    reads s0, ...): one static function, added to ``result.routines``. Returns, per repeat
    that calls one, the call's C line."""
    members: dict[int, list[int]] = {}
    for r, number in enumerate(program.routines):
        members.setdefault(number, []).append(r)
    calls: dict[int, str] = {}
    for looped in members.values():
        alike: dict[tuple[str, ...], list[int]] = {}  # repeats whose bodies are the same text
        for r in looped:
            if bodies[r] is not None:
                text = tuple(_COMMENT.sub("", line) for line in _by_role(bodies[r])[0])
                alike.setdefault(text, []).append(r)
        for repeats in alike.values():
            if len(repeats) < 2:
                continue
            named = [_by_role(bodies[r]) for r in repeats]
            lines, parameters = named[0]
            lines = [_STAGE.sub("every stage:", line) for line in lines]
            name = f"{prefix}_routine{len(result.routines)}"
            flag = any("saturated" in line for line in lines)
            signature = [f"{word_type} *{role}" if role.startswith("out") else
                         f"const {word_type} *{role}" if role.startswith("in") else
                         f"{word_type} {role}" for role, _ in parameters]
            if flag:
                signature.append("unsigned int *saturated")
            count = len(program.repeats[repeats[0]])
            result.routines.append({
                "name": name, "parameters": ", ".join(signature),
                "lines": [f"for (unsigned int {LOOP_INDEX} = 0u; {LOOP_INDEX} < {count}u; "
                          f"{LOOP_INDEX}++) {{", *(f"    {line}" for line in lines), "}"]})
            for r, (_, actual) in zip(repeats, named, strict=True):
                arguments = [value for _, value in actual] + (["&saturated"] if flag else [])
                calls[r] = f"{name}({', '.join(arguments)}); /* the same work for every oscillator */"
    return calls


def _by_role(body: list[str]) -> tuple[list[str], list[tuple[str, str]]]:
    """A loop body with its values named by role, and the parameters (role, value passed) in
    order of first use."""
    local = {m.group(1) for line in body for m in [re.match(r"const \S+ v(\d+) =", line)] if m}
    written = {m.group(1) for line in body for m in [re.match(r"v(\d+)\[", line)] if m}
    roles: dict[str, str] = {}
    counts = {"t": 0, "out": 0, "in": 0, "s": 0}
    parameters: list[tuple[str, str]] = []

    def role(match: re.Match) -> str:
        number, array = match.group(1), match.group(2) or ""
        if number not in roles:
            kind = ("t" if number in local else "out" if number in written else
                    "in" if array else "s")
            roles[number] = f"{kind}{counts[kind]}"
            counts[kind] += 1
            if kind != "t":
                parameters.append((roles[number], f"v{number}"))
        return roles[number] + array

    lines = [_VALUE.sub(role, line).replace("&saturated", "saturated") for line in body]
    return lines, parameters


def _loop_body(program: IntegerProgram, repeat: tuple, r: int, kept: set[int], render: Render,
               symbol_of: dict[int, str], stored: dict[int, tuple[int, int]], loop_name,
               readers_outside: set, word_type: str, table_entry: str,
               tables: list[dict]) -> list[str] | None:
    """The loop's body for one repeat, or None where two copies' C differ at some position."""
    body = []
    new_tables = []
    new_uses: list[tuple[str, list[int]]] = []
    for p in range(len(repeat[0])):
        place = [copy[p] for copy in repeat]
        if len({i in kept for i in place}) != 1:
            return None
        if place[0] not in kept:
            continue
        symbol = None
        if kind_of(program.ops[place[0]].kind).constant_role and len(
                {symbol_of.get(i) for i in place}) > 1:
            if len({stored[i][1] for i in place}) != 1:
                return None  # the copies' constants have different formats
            entries = [int_literal(stored[i][0], program.word_bits) for i in place]
            same = [t["name"] for t in tables + new_tables if t["entries"] == entries
                    and t["fraction_bits"] == stored[place[0]][1]]
            name = same[0] if same else f"kc{len(tables) + len(new_tables)}"
            if not same:
                fmt = f"Q{program.word_bits - stored[place[0]][1]}.{stored[place[0]][1]}"
                new_tables.append({
                    "name": name, "length": len(place), "entries": entries,
                    "fraction_bits": stored[place[0]][1], "uses": [[] for _ in place],
                    "stored": [stored[i][0] for i in place],
                    "comment": comment_text(f"one per oscillator, {fmt} (first use: "
                                            f"{program.ops[place[0]].note})")})
            new_uses.append((name, place))
            symbol = f"{table_entry}({name}, {LOOP_INDEX})"
        texts = {render(i, tuple(loop_name(a, r, c) for a in program.ops[i].args), symbol)[0]
                 for c, i in enumerate(place)}
        if len(texts) != 1:
            return None
        expression = texts.pop()
        note = _note(program, place)
        if (r, p) in readers_outside:
            body.append(f"v{place[0]}[{LOOP_INDEX}] = {expression}; /* {note} */")
        else:
            body.append(f"const {word_type} v{place[0]} = {expression}; /* {note} */")
    tables += new_tables
    by_name = {t["name"]: t for t in tables}
    for name, place in new_uses:  # which values each entry feeds, once the loop is sure
        for c, i in enumerate(place):
            by_name[name]["uses"][c].append(i)
    return body


def _note(program: IntegerProgram, place: list[int]) -> str:
    op = program.ops[place[0]]
    fmt = f"Q{program.word_bits - op.fraction_bits}.{op.fraction_bits}"
    proven = ", proven to fit" if all(program.ops[i].proven for i in place) else ""
    return comment_text(f"{fmt}{proven}, each oscillator as the first: {op.note}")
