"""The validation layer's rules, lamp names checked against the shipped line lists, and a light
start-up (``import wavecal`` and the command-line parser import no heavy library)."""
from __future__ import annotations

import math
import subprocess
import sys

import pytest

import wavecal.linelists
from wavecal.validation import Integer, Invalid, Real, Sequence, parse_lamps


@pytest.mark.parametrize("value", [True, "1", 1.5, None, [1]])
def test_integer_is_strict(value):
    with pytest.raises(Invalid, match="must be"):
        Integer(low=1)(value)


@pytest.mark.parametrize("value", [True, "65000", math.nan, math.inf, -5.0, 0])
def test_positive_real_is_strict(value):
    with pytest.raises(Invalid, match="must be a positive number"):
        Real(low=0, open_low=True)(value)


def test_rules_return_clean_values():
    assert Real(low=0)(3) == 3.0 and isinstance(Real(low=0)(3), float)
    assert Integer(choices=(0, 1))(1) == 1
    assert Sequence(Integer(low=1), length=2)([512, 4128]) == (512, 4128)
    with pytest.raises(Invalid, match="item 1"):
        Sequence(Integer(low=1), length=2)([512, 0])
    with pytest.raises(Invalid, match="increasing"):
        Sequence(Real(), length=2, increasing=True)([2.0, 1.0])


def test_lamp_names_come_from_the_shipped_line_lists(monkeypatch):
    known = wavecal.linelists.available_elements()
    assert parse_lamps("HgAr + neon lamp") == ("Hg", "Ar", "Ne")
    assert parse_lamps("none") == ()
    with pytest.raises(Invalid, match=r"unknown lamp 'Arr'.*known: " + ", ".join(known)):
        parse_lamps("Hg+Arr")
    # another set of line lists (one with hydrogen, none for xenon): the names follow it
    monkeypatch.setattr(wavecal.linelists, "available_elements", lambda: ("Ar", "H", "Hg", "Ne"))
    assert parse_lamps("H+Ne") == ("H", "Ne")
    assert parse_lamps("HgAr") == ("Hg", "Ar")
    with pytest.raises(Invalid, match=r"unknown lamp 'Xe'.*known: Ar, H, Hg, Ne"):
        parse_lamps("Xe")


HEAVY = ("pandas", "scipy", "astropy", "lmfit", "matplotlib")


@pytest.mark.parametrize("argv", [["--help"], ["--version"], ["solve", "--help"]])
def test_start_up_imports_nothing_heavy(argv):
    code = (f"import sys\nimport wavecal\nfrom wavecal.cli.main import main\n"
            f"try:\n    main({argv!r})\nexcept SystemExit:\n    pass\n"
            f"print(sorted(m for m in {HEAVY!r} if m in sys.modules))")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=120)
    assert run.stdout.strip().splitlines()[-1] == "[]"
