"""Names in plans: ion charges read from ion names, and "did you mean" hints for unknown names."""

from __future__ import annotations

import difflib
import re


def ion_charge(ion: str) -> int:
    """Charge of an ion written like 'K+', 'NO3-', 'Cu2+', 'SO4 2-', 'SO4-2', 'Ca+2', 'Ca++' or '[SO4]2-'.

    Digits right before the sign are read as a charge only after a bare element symbol ('Cu2+',
    'Al3+'); otherwise they are a subscript ('NO3-'). Write 'CO3 2-' (with a space) where both meet.
    """
    s = ion.strip()
    bad = f"ion '{ion}' has no readable charge: write it like 'K+', 'NO3-', 'Cu2+' or 'SO4 2-'"
    m = re.fullmatch(r"(\S+)\s+(\d*)([+-])", s)  # 'SO4 2-'
    if m:
        n = int(m.group(2) or 1)
        return n if m.group(3) == "+" else -n
    m = re.fullmatch(r"\[(.+)\](\d*)([+-])", s)  # '[SO4]2-'
    if m:
        n = int(m.group(2) or 1)
        return n if m.group(3) == "+" else -n
    m = re.fullmatch(r"(.*?[A-Za-z\])])([+-])(\d+)", s)  # 'SO4-2' has a digit before: see below
    if m and not m.group(1)[-1].isdigit():
        n = int(m.group(3))
        return n if m.group(2) == "+" else -n
    m = re.fullmatch(r"(.*?\d)([+-])(\d+)", s)  # 'SO4-2', 'PO4-3'
    if m:
        n = int(m.group(3))
        return n if m.group(2) == "+" else -n
    m = re.fullmatch(r"(.+?)(\++|-+)", s)  # 'K+', 'Ca++', 'NO3-', 'Cu2+'
    if not m:
        raise ValueError(bad)
    body, signs = m.groups()
    sign = 1 if signs[0] == "+" else -1
    if len(signs) > 1:
        return sign * len(signs)
    el = re.fullmatch(r"([A-Z][a-z]?)(\d+)", body)
    if el:
        if len(el.group(2)) > 1:
            raise ValueError(f"ion '{ion}' is ambiguous: write the charge apart, e.g. '{el.group(1)} 2+'")
        return sign * int(el.group(2))
    tail = re.search(r"\d+$", body)
    if tail and len(tail.group()) > 1:
        raise ValueError(f"ion '{ion}' is ambiguous: write the charge apart, e.g. 'CO3 2-'")
    return sign


def unknown_name(what: str, name: str, known: list[str]) -> str:
    """Message for a name not among ``known``, suggesting the nearest one."""
    near = difflib.get_close_matches(name, known, n=1, cutoff=0.4)
    hint = f"; did you mean '{near[0]}'?" if near else ""
    return f"unknown {what} '{name}'{hint} (known: {', '.join(known) or 'none'})"
