#!/usr/bin/env python3
"""Writes the man page of one gloam command (or of gloam itself) from the
program's own --help text, so that the pages never drift from the options
the program really takes. Used by meson at build time; standard library only.

usage: man_page.py GLOAM COMMAND|- OUTPUT
"""
import re
import subprocess
import sys

DATE = "2026"


def esc(text):
    """Escapes a line of help text for roff."""
    text = text.replace("\\", "\\e")
    text = re.sub(r"(^|\s)-", lambda m: m.group(1) + "\\-", text)
    if text.startswith((".", "'")):
        text = "\\&" + text
    return text


def help_of(gloam, command):
    args = [gloam, "--help"] if command == "-" else [gloam, command, "--help"]
    r = subprocess.run(args, capture_output=True, text=True)
    if r.returncode != 0:
        sys.exit(f"man_page.py: {' '.join(args)} exited {r.returncode}: {r.stderr.strip()}")
    return r.stdout.splitlines()


def summaries(gloam):
    """The one-line summary of each command, from gloam --help."""
    out, inside = {}, False
    for line in help_of(gloam, "-"):
        if line.startswith("commands:"):
            inside = True
            continue
        m = re.match(r"^  (\w+)\s+(.*)$", line)
        if inside and m:
            out[m.group(1)] = m.group(2)
        elif inside and line.strip() == "":
            inside = False
    return out


def options_section(lines):
    """Turns '  --opt ARG   text' blocks (with indented continuation lines)
    into .TP entries."""
    out = []
    for line in lines:
        m = re.match(r"^  (--?\S+(?: [A-Z][A-Z0-9_.,|:\[\]-]*)?)(\s{2,}(.*))?$", line)
        if m:
            out += [".TP", "\\fB" + esc(m.group(1)) + "\\fR"]
            if m.group(3):
                out.append(esc(m.group(3)))
        elif re.match(r"^\S.*:$", line):
            out += [".SS " + esc(line[:-1].capitalize())]
        elif re.match(r"^\s+[\w-]+: ", line):
            out += [".br", esc(line.strip())]  # a value of the option above, one a line
        elif line.strip():
            out.append(esc(line.strip()))
    return out


def page_for_command(gloam, command, summary):
    lines = help_of(gloam, command)
    usage = lines[0].removeprefix("usage: ").strip()
    body = lines[1:]
    desc, opts, common, part = [], [], [], "desc"
    for line in body:
        if line.startswith("common options:"):
            part = "common"
            continue
        if part == "desc" and (re.match(r"^  -", line) or re.match(r"^\S.*:$", line)):
            part = "opts"
        {"desc": desc, "opts": opts, "common": common}[part].append(line)
    name = f"gloam-{command}"
    roff = [f'.TH {name.upper()} 1 "{DATE}" "gloam" "gloam manual"', ".SH NAME",
            f"{name} \\- {esc(summary)}", ".SH SYNOPSIS", esc(usage), ".SH DESCRIPTION"]
    para = []
    for line in desc:
        if line.strip():
            para.append(esc(line.strip()))
        elif para:
            roff += para + [".PP"]
            para = []
    roff += para
    if opts:
        roff += [".SH OPTIONS"] + options_section(opts)
    if common:
        roff += [".SH COMMON OPTIONS"] + options_section(common)
    roff += [".SH EXIT STATUS", "0 on success, 1 on bad input or usage (the message names the file",
             "and the problem), 2 on an internal failure.",
             ".SH FILES", "Products are written under a temporary name and renamed into place when",
             "complete; an existing product is replaced only with \\fB\\-\\-overwrite\\fR.",
             "Inputs are opened read-only.",
             ".SH SEE ALSO", "\\fBgloam\\fR(1)"]
    return roff


def page_for_gloam(gloam, summ):
    roff = ['.TH GLOAM 1 "' + DATE + '" "gloam" "gloam manual"', ".SH NAME",
            "gloam \\- from a coronagraphic image sequence to detections and contrast limits",
            ".SH SYNOPSIS", "gloam COMMAND [options]", ".br", "gloam \\-\\-help | \\-\\-version",
            ".SH DESCRIPTION",
            "gloam aligns a pupil-tracking coronagraphic sequence on the hidden star, removes",
            "the starlight, finds point sources with small-sample statistics and calibrates",
            "contrast curves with fake companions. Each step is a command:",
            ".SH COMMANDS"]
    for cmd, text in summ.items():
        roff += [".TP", f"\\fBgloam {cmd}\\fR", esc(text) + f" (\\fBgloam-{cmd}\\fR(1))"]
    roff += [".SH EXIT STATUS", "0 on success, 1 on bad input or usage, 2 on an internal failure.",
             ".SH SEE ALSO", ", ".join(f"\\fBgloam-{c}\\fR(1)" for c in summ)]
    return roff


def main():
    if len(sys.argv) != 4:
        sys.exit(__doc__.strip().splitlines()[-1])
    gloam, command, output = sys.argv[1:]
    summ = summaries(gloam)
    if command == "-":
        roff = page_for_gloam(gloam, summ)
    else:
        if command not in summ:
            sys.exit(f"man_page.py: {command} is not among the commands of {gloam} --help")
        roff = page_for_command(gloam, command, summ[command])
    with open(output, "w") as f:
        f.write("\n".join(roff) + "\n")


if __name__ == "__main__":
    main()
