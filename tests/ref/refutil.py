# SPDX-License-Identifier: GPL-3.0-or-later
"""Helpers for the reference checks: run the binaries, skip visibly when an
oracle is missing (exit status 77, counted as skipped by run.sh)."""
import importlib
import os
import subprocess
import sys

SKIP = 77


def need(module, package):
    """Import module or skip the whole script, naming the Debian package."""
    try:
        return importlib.import_module(module)
    except ImportError:
        print(f"SKIP: oracle {module} not installed (Debian package {package})")
        sys.exit(SKIP)


def run(args, stdin=None):
    p = subprocess.run(args, input=stdin, capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"{args[0]} failed ({p.returncode}): {p.stderr}")
    return p.stdout


def etacal():
    return os.environ["ETACAL"]


def refcalc():
    return os.environ["REFCALC"]
