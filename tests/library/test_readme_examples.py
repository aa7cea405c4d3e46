"""README's library examples, built out of tree against a temporary install of this build.

Takes the ```cpp, ```c, ```fortran and ```cmake blocks of README's library section (each
exactly once), installs the build tree into a temporary prefix with `cmake --install`,
writes the blocks as main.cpp, main.c, main.f90 and CMakeLists.txt, configures them with
CMAKE_PREFIX_PATH set to the prefix, builds, and runs each program on 2 ranks. Each must
exit 0 and print, from one rank, one line `capacitance C expected E` with C within 1 % of E.
The Fortran module is part of the install: its absence is a failure, not a skip.
"""

import argparse
import math
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SOURCES = {"cpp": "main.cpp", "c": "main.c", "fortran": "main.f90", "cmake": "CMakeLists.txt"}
RESULT = re.compile(r"^capacitance\s+(\S+)\s+expected\s+(\S+)\s*$")
# The examples agree with their reference to discretisation accuracy, not to rounding.
TOLERANCE = 0.01
# Seconds before a step is taken to be hung and killed: several times what each took on
# 2 busy cores (install 0.1 s, configure 3 s, build 3 s, a run 0.5 s).
TIMEOUTS = {"install": 60, "configure": 120, "build": 180, "run": 30}


class Failure(Exception):
    """A step or a check failed; the message says which and why."""


def section_blocks(readme, heading):
    """{tag: [code, ...]} of the fenced blocks under `## heading`, up to the next heading
    of level 1 or 2."""
    lines = Path(readme).read_text().splitlines()
    try:
        start = lines.index(f"## {heading}") + 1
    except ValueError:
        raise Failure(f"{readme} has no section '## {heading}'")
    blocks, tag, body = {}, None, []
    for line in lines[start:]:
        if tag is None and re.match(r"#{1,2} ", line):
            break
        if line.startswith("```"):
            if tag is None:
                tag, body = line[3:].strip(), []
            else:
                blocks.setdefault(tag, []).append("\n".join(body) + "\n")
                tag = None
        elif tag is not None:
            body.append(line)
    if tag is not None:
        raise Failure(f"unclosed ```{tag} block in '## {heading}'")
    return blocks


def example_sources(blocks, heading):
    """The one block of each tag in SOURCES, or a Failure naming every missing or repeated one."""
    wrong = [f"```{tag} appears {len(blocks.get(tag, []))} times"
             for tag in SOURCES if len(blocks.get(tag, [])) != 1]
    if wrong:
        raise Failure(f"'## {heading}' needs each example exactly once: " + "; ".join(wrong))
    return {SOURCES[tag]: blocks[tag][0] for tag in SOURCES}


def run(step, argv, timings, label=None, cwd=None):
    """argv to completion within the step's timeout, killed with its children (every rank)
    if it hangs; a Failure unless it exits 0. Returns its output; its time goes to
    `timings` under `label` (default: the step)."""
    started = time.monotonic()
    proc = subprocess.Popen([str(a) for a in argv], stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, cwd=cwd,
                            start_new_session=True)
    try:
        out, _ = proc.communicate(timeout=TIMEOUTS[step])
    except subprocess.TimeoutExpired:
        # SIGTERM first: mpiexec passes it on to the ranks, which sit in sessions of their
        # own and outlive a killed mpiexec by seconds.
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            out, _ = proc.communicate(timeout=10)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            out, _ = proc.communicate()
        raise Failure(f"{step} hung (killed after {TIMEOUTS[step]} s): {' '.join(map(str, argv))}"
                      f"\n{out}")
    timings.append((label or step, time.monotonic() - started))
    if proc.returncode != 0:
        raise Failure(f"{step} exited {proc.returncode}: {' '.join(map(str, argv))}\n{out}")
    return out


def executables(cmake_block):
    """{source file: executable name} from the add_executable(NAME main.X) lines; every
    example must be built by one."""
    found = {src: name for name, src in
             re.findall(r"add_executable\(\s*(\S+)\s+(main\.\w+)\s*\)", cmake_block)}
    missing = [src for src in SOURCES.values() if src != "CMakeLists.txt" and src not in found]
    if missing:
        raise Failure(f"the ```cmake block builds no executable from {', '.join(missing)}")
    return found


def check_result(program, out):
    """The one `capacitance C expected E` line, with finite C, E != 0 and |C - E| <= 1 % |E|."""
    lines = [m for m in map(RESULT.match, out.splitlines()) if m]
    if len(lines) != 1:
        raise Failure(f"{program}: expected one 'capacitance C expected E' line (from one rank),"
                      f" got {len(lines)}:\n{out}")
    value, expected = float(lines[0][1]), float(lines[0][2])
    if not (math.isfinite(value) and math.isfinite(expected) and expected != 0):
        raise Failure(f"{program}: unusable figures {lines[0][0]!r}")
    if abs(value - expected) > TOLERANCE * abs(expected):
        raise Failure(f"{program}: capacitance {value} is not within {TOLERANCE:.0%} of {expected}")
    return lines[0][0]


def main():
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--readme", required=True, help="README.md (or a draft of its section)")
    parser.add_argument("--section", default="Using gridlu as a library", help="its heading")
    parser.add_argument("--build-dir", required=True, help="the gridlu build tree to install")
    parser.add_argument("--cmake", required=True, help="the cmake executable")
    parser.add_argument("--mpiexec", required=True, help="the MPI launcher")
    parser.add_argument("--generator", help="CMake generator for the examples")
    parser.add_argument("--compiler", action="append", default=[], metavar="LANG=PATH",
                        help="compiler of a language, as gridlu's build uses it (repeatable)")
    args = parser.parse_args()
    timings = []
    try:
        sources = example_sources(section_blocks(args.readme, args.section), args.section)
        programs = executables(sources["CMakeLists.txt"])
        with tempfile.TemporaryDirectory(prefix="gridlu-library-") as tmp:
            prefix, src, build = Path(tmp, "prefix"), Path(tmp, "src"), Path(tmp, "build")
            run("install", [args.cmake, "--install", args.build_dir, "--prefix", prefix], timings)
            if not any(prefix.rglob("gridlu.mod")):
                raise Failure("the install has no Fortran module gridlu.mod: gridlu was built "
                              "without gfortran or without its gridlu_fortran target")
            src.mkdir()
            for name, code in sources.items():
                (src / name).write_text(code)
            configure = [args.cmake, "-S", src, "-B", build, f"-DCMAKE_PREFIX_PATH={prefix}",
                         "-DCMAKE_BUILD_TYPE=Release"]
            configure += [f"-DCMAKE_{c.split('=', 1)[0]}_COMPILER={c.split('=', 1)[1]}"
                          for c in args.compiler]
            if args.generator:
                configure += ["-G", args.generator]
            run("configure", configure, timings)
            run("build", [args.cmake, "--build", build, "-j2"], timings)
            for source, name in sorted(programs.items()):
                out = run("run", [args.mpiexec, "-n", "2", build / name], timings,
                          label=f"run {name}", cwd=tmp)
                print(f"ok   {name}: {check_result(f'{name} ({source})', out)}")
    except Failure as failure:
        print(f"FAIL {failure}")
        return 1
    finally:
        print("times: " + ", ".join(f"{step} {seconds:.1f} s" for step, seconds in timings))
    return 0


if __name__ == "__main__":
    sys.exit(main())
