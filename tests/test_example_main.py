"""The example main (``gen --example TARGET``): it builds warning-free under the strict flags with
the target's cross compiler, and, run on an emulated board with a test hook, the timer interrupt
drives the step once per tick from the init state after the self-test passes: the state it reports
after N ticks is the golden model's after N steps (orbitfix.gen.program.golden.run), the timer's
period register holds clock / loop rate - 1, a build whose self-test fails never starts the timer,
and a saturated step stops the loop.

Seeded faults it must catch: the interrupt calling the step twice a tick; a constant of NAME.c
changed (the example halts before the timer starts); a state put outside its range (the loop halts
on the saturated-step count).

Skips only when the tools are missing on a developer's machine; with CI set it must run.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from orbitfix.gen.c.example_main import AVR_PRESCALERS, EXAMPLE_TARGETS, avr_prescaler
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.gen.safety import SAFETY_NOTE
from orbitfix.verify.cli import gen as gen_verb
from orbitfix.verify.cli.main import main
from orbitfix.verify.targets.board_profiles import boards_folder

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wconversion", "-Wsign-conversion", "-pedantic",
          "-Wundef", "-Wshadow", "-Werror", "-O2"]
TICKS = 200
MPS2_SYSTICK_HZ = 25_000_000  # the clock SysTick counts on QEMU's mps2-an385 (shared notes)
RUN_SECONDS = 120
CORTEX_M = ["-mcpu=cortex-m3", "-mthumb", "-ffunction-sections", "-fdata-sections"]
CORTEX_M_LINK = ["-nostartfiles", "--specs=nano.specs", "--specs=nosys.specs", "-Wl,--gc-sections"]
# startup.c (vectors: SysTick calls systick_interrupt), the CMSDK UART and the semihosting exit
CORTEX_M_GLUE = ["startup.c", "uart_cmsdk.c", "finish_semihosting.c"]
REPORT = re.compile(r"report ticks (\d+) halted (-?\d+) period (\d+) saturated (\d+) state((?: -?\d+)+)")
ANSI_COLOUR = re.compile(r"\x1b\[[0-9;]*m")

# The test hook's report, sent on the board's UART: ticks, why it halted, the timer's period
# register, the saturated-step count and the state.
REPORT_CORTEX_M = """\
#include <stdint.h>

#include "board.h"
#include "cortex_m.h"
#include "{prefix}.h"

void {prefix}_example_test_report(const {prefix}_state_t *state, uint32_t ticks, int halted);

/* Nothing is received: the UART driver's queue is never used. */
int rx_queue_room(void) {{ return 0; }}
void rx_queue_put(uint8_t byte) {{ (void)byte; }}

static void put_byte(uint8_t byte) {{ uart_send(byte); }}
static void link_start(void) {{ uart_start(115200u); }}
static uint32_t period_register(void) {{ return SYST_RVR; }}
static void finish(void) {{ board_finish(0); }}
{common}"""

REPORT_AVR = """\
#include <stdint.h>

#include <avr/interrupt.h>
#include <avr/io.h>
#include <avr/sleep.h>

#include "{prefix}.h"

void {prefix}_example_test_report(const {prefix}_state_t *state, uint32_t ticks, int halted);

static void put_byte(uint8_t byte)
{{
    while (!(UCSR0A & (1u << UDRE0))) {{
    }}
    UDR0 = byte;
}}
static void link_start(void)
{{
    UBRR0 = 0u;
    UCSR0A = (uint8_t)(1u << U2X0);
    UCSR0B = (uint8_t)(1u << TXEN0);
    UCSR0C = (uint8_t)((1u << UCSZ01) | (1u << UCSZ00));
}}
static uint32_t period_register(void) {{ return OCR1A; }}
/* Wait until the last byte has left, then sleep with interrupts off: simavr ends there. */
static void finish(void)
{{
    UCSR0A = (uint8_t)(UCSR0A | (1u << TXC0));
    put_byte((uint8_t)'\\n');
    while (!(UCSR0A & (1u << TXC0))) {{
    }}
    sleep_enable();
    cli();
    for (;;) {{
        sleep_cpu();
    }}
}}
{common}"""

REPORT_COMMON = """
static void put_text(const char *text)
{{
    while (*text != '\\0') {{
        put_byte((uint8_t)*text);
        ++text;
    }}
}}

static void put_number(int32_t value)
{{
    char digits[12];
    unsigned int count = 0u;
    uint32_t magnitude = value < 0 ? 0u - (uint32_t)value : (uint32_t)value;
    put_byte((uint8_t)' ');
    if (value < 0) {{
        put_byte((uint8_t)'-');
    }}
    do {{
        digits[count++] = (char)('0' + (int)(magnitude % 10u));
        magnitude /= 10u;
    }} while (magnitude != 0u);
    while (count > 0u) {{
        put_byte((uint8_t)digits[--count]);
    }}
}}

void {prefix}_example_test_report(const {prefix}_state_t *state, uint32_t ticks, int halted)
{{
    link_start();
    put_text("report ticks");
    put_number((int32_t)ticks);
    put_text(" halted");
    put_number((int32_t)halted);
    put_text(" period");
    put_number((int32_t)period_register());
    put_text(" saturated");
    put_number((int32_t)state->{saturation_field});
    put_text(" state");
{fields}
    put_byte((uint8_t)'\\n');
    finish();
}}
"""


def _need(*tools: str) -> None:
    missing = [tool for tool in tools if shutil.which(tool) is None]
    if missing and not os.environ.get("CI"):
        pytest.skip(f"{', '.join(missing)} not installed")


@pytest.fixture(scope="module")
def generated(tmp_path_factory):
    """``generated(folder, target, word)``: the files ``gen vanderpol --word WORD --example TARGET``
    writes, copied into ``folder`` (gen runs once per module; each test changes its own copy)."""
    made: dict[tuple[str, int], Path] = {}

    def copy_into(folder: Path, target: str, word: int) -> Path:
        if (target, word) not in made:
            out = tmp_path_factory.mktemp(f"generated_{target}_{word}")
            assert main(["gen", "vanderpol", "--word", str(word), "-o", str(out), "--example", target]) == 0
            made[target, word] = out
        shutil.copytree(made[target, word], folder, dirs_exist_ok=True)
        return folder

    return copy_into


def _report_source(template: str, state_names: tuple[str, ...]) -> str:
    fields = "\n".join(f"    put_number((int32_t)state->{name});" for name in state_names)
    common = REPORT_COMMON.format(prefix="vanderpol", saturation_field="saturated_steps", fields=fields)
    return template.format(prefix="vanderpol", common=common)


@pytest.fixture(scope="module")
def vanderpol32():
    return design(load_model("vanderpol"))


@pytest.fixture(scope="module")
def vanderpol16():
    return design(load_model("vanderpol").with_fixed_point(word_bits=16))


def _golden(built, steps: int) -> tuple[list[int], int]:
    program = built.plan.program
    trajectory, counts = golden.run_counted(program, np.array(built.plan.initial_state), steps)
    return [int(v) for v in trajectory[steps]], int(counts[steps])


# ---- building ----------------------------------------------------------------------------------

CROSS_COMPILERS = [
    ("arm-none-eabi-gcc", ["-mcpu=cortex-m0", "-mthumb"]),
    ("arm-none-eabi-gcc", ["-mcpu=cortex-m3", "-mthumb"]),
    ("arm-none-eabi-gcc", ["-mcpu=cortex-m4", "-mthumb", "-mfpu=fpv4-sp-d16", "-mfloat-abi=hard"]),
    ("clang", ["--target=thumbv7m-none-eabi", "-ffreestanding"]),
]


@pytest.mark.parametrize(("cc", "flags"), CROSS_COMPILERS, ids=["gcc-m0", "gcc-m3", "gcc-m4f", "clang-m3"])
def test_the_cortex_m_example_builds_warning_free(cc: str, flags: list[str], generated,
                                                  tmp_path: Path) -> None:
    if cc == "clang" and shutil.which(cc) is None:
        pytest.skip("clang is not installed (the warning matrix's second compiler)")
    _need(cc)
    folder = generated(tmp_path, "cortex-m", 32)
    # clang has no C library for the target here: the example needs only <stdint.h>, the
    # self-test also <string.h>
    sources = ["vanderpol_example_main.c"] if cc == "clang" else ["vanderpol_example_main.c", "vanderpol.c",
                                                                 "vanderpol_selftest.c"]
    for source in sources:
        done = subprocess.run([cc, *STRICT, *flags, "-DVANDERPOL_EXAMPLE_CORE_CLOCK_HZ=480000000u", "-c",
                               source, "-o", "out.o"], cwd=folder, capture_output=True, text=True)
        assert done.returncode == 0, done.stderr


@pytest.mark.parametrize(("clock", "says"), [
    (None, "set VANDERPOL_EXAMPLE_CORE_CLOCK_HZ"),
    ("20000000000u", "24-bit reload"),  # 20,000,000 clocks a tick: more than 2^24
    ("1000u", "slower than twice the loop rate"),
    ("25000500u", "not a whole multiple"),
])
def test_the_cortex_m_example_refuses_a_clock_it_cannot_keep(clock, says, generated, tmp_path: Path) -> None:
    _need("arm-none-eabi-gcc")
    folder = generated(tmp_path, "cortex-m", 32)
    define = [f"-DVANDERPOL_EXAMPLE_CORE_CLOCK_HZ={clock}"] if clock else []
    done = subprocess.run(["arm-none-eabi-gcc", *STRICT, "-mcpu=cortex-m3", "-mthumb", *define, "-c",
                           "vanderpol_example_main.c", "-o", "main.o"], cwd=folder,
                          capture_output=True, text=True)
    assert done.returncode != 0 and says in done.stderr


@pytest.mark.parametrize("word", [32, 16])
def test_the_avr_example_builds_warning_free(word: int, generated, tmp_path: Path) -> None:
    _need("avr-gcc")
    folder = generated(tmp_path, "avr", word)
    subprocess.run(["avr-gcc", *STRICT, "-mmcu=atmega328p", "-DF_CPU=16000000UL",
                    "vanderpol_example_main.c", "vanderpol.c", "vanderpol_selftest.c", "-o", "main.elf"],
                   cwd=folder, check=True, capture_output=True)


def test_the_avr_prescaler_fits_sixteen_bits() -> None:
    # Timer1 period = F_CPU / (prescaler x loop rate) counts, at most 2^16 (OCR1A is 16 bits;
    # ATmega328P datasheet, from memory): checked here by brute force over the prescalers.
    for loop_hz in (1, 3, 50, 200, 400, 1000, 2000, 30000):
        prescaler, _ = avr_prescaler(loop_hz)
        counts = 16_000_000 // (prescaler * loop_hz)
        assert 2 <= counts <= 65536
        smaller = [p for p, _ in AVR_PRESCALERS if p < prescaler and 16_000_000 // (p * loop_hz) <= 65536
                   and 16_000_000 % (p * loop_hz) == 0]
        assert not smaller


@pytest.mark.parametrize("target", EXAMPLE_TARGETS)
def test_the_banner_has_the_licence_line_first_and_the_caution(target: str, generated,
                                                               tmp_path: Path) -> None:
    text = (generated(tmp_path, target, 32) / "vanderpol_example_main.c").read_text()
    assert text.splitlines()[0] == "/* SPDX-License-Identifier: MIT */"
    banner = " ".join(text[:text.index("*/", 40)].replace(" * ", " ").split())
    assert SAFETY_NOTE in banner
    assert "calling the step function 1000 times a second" in banner  # vanderpol.toml's loop_hz


# ---- errors -------------------------------------------------------------------------------------

def test_the_command_line_offers_the_targets_there_are_templates_for() -> None:
    assert gen_verb.EXAMPLE_TARGETS == EXAMPLE_TARGETS


def test_an_unknown_target_is_refused_with_exit_2(tmp_path: Path, capsys) -> None:
    assert main(["gen", "vanderpol", "-o", str(tmp_path), "--example", "pic"]) == 2
    error = capsys.readouterr().err
    assert "--example" in error and "cortex-m" in error and "avr" in error
    assert not list(tmp_path.iterdir())


def test_a_fractional_loop_rate_is_refused_with_exit_2(tmp_path: Path, capsys) -> None:
    model = tmp_path / "slow.toml"
    library = Path(__file__).parent.parent / "gen" / "model" / "library" / "vanderpol.toml"
    model.write_text(library.read_text().replace("loop_hz = 1000", "loop_hz = 999.5"))
    out = tmp_path / "out"
    assert main(["gen", str(model), "-o", str(out), "--example", "cortex-m"]) == 2
    assert "whole loop rate" in capsys.readouterr().err
    assert not out.exists()


# ---- running on an emulated board -------------------------------------------------------------

def _build_cortex_m(folder: Path, built, ticks: int = TICKS) -> Path:
    """The example with its test hook, linked with the board glue of boards/cortex_m/ for QEMU's
    mps2-an385 (its SysTick vector calls systick_interrupt: the example's tick handler here)."""
    glue = boards_folder() / "cortex_m"
    (folder / "report.c").write_text(_report_source(REPORT_CORTEX_M, built.plan.program.state_names))
    sources = [*(str(glue / name) for name in CORTEX_M_GLUE), "vanderpol_example_main.c",
               "vanderpol.c", "vanderpol_selftest.c", "report.c"]
    image = folder / "example.elf"
    subprocess.run(["arm-none-eabi-gcc", *STRICT, *CORTEX_M, f"-I{glue}",
                    f"-I{boards_folder() / 'common'}", "-I.",
                    f"-DVANDERPOL_EXAMPLE_CORE_CLOCK_HZ={MPS2_SYSTICK_HZ}u",
                    "-DVANDERPOL_EXAMPLE_TICK_HANDLER=systick_interrupt",
                    f"-DVANDERPOL_EXAMPLE_TEST_HOOK={ticks}u", *CORTEX_M_LINK,
                    f"-L{glue}", f"-T{glue / 'mps2.ld'}", *sources, "-o", str(image)],
                   cwd=folder, check=True, capture_output=True, text=True)
    return image


def _run_cortex_m(image: Path) -> re.Match:
    done = subprocess.run(["qemu-system-arm", "-M", "mps2-an385", "-nographic", "-monitor", "none",
                           "-semihosting-config", "enable=on,target=native", "-serial", "stdio",
                           "-kernel", str(image)], capture_output=True, timeout=RUN_SECONDS)
    found = REPORT.search(done.stdout.decode(errors="replace"))
    assert found is not None and done.returncode == 0, (done.returncode, done.stdout, done.stderr)
    return found


def _build_avr(folder: Path, built, ticks: int = TICKS) -> Path:
    (folder / "report.c").write_text(_report_source(REPORT_AVR, built.plan.program.state_names))
    image = folder / "example.elf"
    subprocess.run(["avr-gcc", *STRICT, "-mmcu=atmega328p", "-DF_CPU=16000000UL",
                    f"-DVANDERPOL_EXAMPLE_TEST_HOOK={ticks}UL", "vanderpol_example_main.c",
                    "vanderpol.c", "vanderpol_selftest.c", "report.c", "-o", str(image)],
                   cwd=folder, check=True, capture_output=True, text=True)
    return image


def _run_avr(image: Path) -> re.Match:
    done = subprocess.run(["simavr", "-m", "atmega328p", "-f", "16000000", str(image)],
                          capture_output=True, timeout=RUN_SECONDS)
    # simavr prints what USART0 sends on its standard error, coloured
    found = REPORT.search(ANSI_COLOUR.sub("", done.stderr.decode(errors="replace")))
    assert found is not None, (done.returncode, done.stdout, done.stderr)
    return found


def _fields(found: re.Match) -> tuple[int, int, int, int, list[int]]:
    ticks, halted, period, saturated = (int(found.group(i)) for i in range(1, 5))
    return ticks, halted, period, saturated, [int(v) for v in found.group(5).split()]


# The period register holds clocks a tick - 1: SysTick interrupts every RVR + 1 clocks, Timer1 in
# CTC mode every OCR1A + 1 counts (Arm's Armv7-M reference manual, the ATmega328P datasheet; from
# memory). The loop rate is vanderpol's 1000 Hz.
TARGETS = {
    "cortex-m-32": ("cortex-m", 32, ("arm-none-eabi-gcc", "qemu-system-arm"), _build_cortex_m,
                    _run_cortex_m, MPS2_SYSTICK_HZ // 1000 - 1),
    "avr-16": ("avr", 16, ("avr-gcc", "simavr"), _build_avr, _run_avr, 16_000_000 // 1000 - 1),
    "avr-32": ("avr", 32, ("avr-gcc", "simavr"), _build_avr, _run_avr, 16_000_000 // 1000 - 1),
}


@pytest.fixture(params=list(TARGETS))
def target(request, generated, tmp_path: Path, vanderpol32, vanderpol16):
    name, word, tools, build, run, period = TARGETS[request.param]
    _need(*tools)
    folder = generated(tmp_path, name, word)
    return folder, build, run, period, vanderpol32 if word == 32 else vanderpol16


def test_the_timer_drives_the_step_once_a_tick(target) -> None:
    folder, build, run, period, built = target
    ticks, halted, reported_period, saturated, state = _fields(run(build(folder, built)))
    assert halted == 0
    assert reported_period == period
    assert ticks >= TICKS
    assert (state, saturated) == _golden(built, ticks)


def test_a_step_called_twice_a_tick_is_caught(target) -> None:
    folder, build, run, _, built = target
    source = folder / "vanderpol_example_main.c"
    text = source.read_text()
    call = "    vanderpol_step(&example_state);\n"
    assert text.count(call) == 1
    source.write_text(text.replace(call, call * 2))
    ticks, halted, _, saturated, state = _fields(run(build(folder, built)))
    assert halted == 0
    assert (state, saturated) != _golden(built, ticks)
    assert (state, saturated) == _golden(built, 2 * ticks)


def test_a_failing_self_test_never_starts_the_timer(target) -> None:
    folder, build, run, _, built = target
    source = folder / "vanderpol.c"
    text = source.read_text()
    constant = re.search(r"static const int(?:16|32)_t k\d+ = INT(?:16|32)_C\((-?\d+)\);", text)
    assert constant is not None
    value = int(constant.group(1))
    changed = value // 2 if abs(value) > 1 else value + 1000
    source.write_text(text.replace(constant.group(0),
                                   constant.group(0).replace(f"({value})", f"({changed})")))
    ticks, halted, reported_period, _, _ = _fields(run(build(folder, built)))
    assert halted > 0 and ticks == 0
    assert reported_period in (0, 0xFFFFFF)  # the period register was never written (reset value)


def test_a_saturated_step_stops_the_loop(target) -> None:
    folder, build, run, _, built = target
    source = folder / "vanderpol_example_main.c"
    text = source.read_text()
    start = "    /* Timer1 in CTC mode" if "Timer1" in text else "    VANDERPOL_EXAMPLE_SYST_RVR ="
    word_max = (1 << (built.plan.program.word_bits - 1)) - 1
    # a state far outside the planned box, written after the self-test, as a corrupted state would be
    source.write_text(text.replace(start, f"    example_state.x = {word_max - 1};\n" + start, 1))
    ticks, halted, _, saturated, state = _fields(run(build(folder, built)))
    initial = list(built.plan.initial_state)
    initial[built.plan.program.state_names.index("x")] = word_max - 1
    trajectory, counts = golden.run_counted(built.plan.program, np.array(initial), ticks)
    assert halted == -1 and saturated >= 1
    assert (state, saturated) == ([int(v) for v in trajectory[ticks]], int(counts[ticks]))
    # it stops at the first tick it sees after the first saturated step (an emulator paced by
    # the host's clock can run a tick or two before the main loop looks)
    assert 1 <= int(np.argmax(counts > 0)) <= ticks


def test_a_period_off_by_one_clock_is_caught(target) -> None:
    folder, build, run, period, built = target
    source = folder / "vanderpol_example_main.c"
    text = source.read_text()
    minus_one = re.compile(r"(_CORE_CLOCK_HZ / VANDERPOL_EXAMPLE_LOOP_HZ|TIMER_COUNTS) - 1(u|UL)\)")
    assert len(minus_one.findall(text)) == 1
    source.write_text(minus_one.sub(r"\1)", text))  # clocks a tick, not clocks a tick - 1
    _, halted, reported_period, _, _ = _fields(run(build(folder, built)))
    assert halted == 0 and reported_period == period + 1
