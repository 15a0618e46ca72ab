"""Edit a scenario file's TOML text in place (keeping comments and layout): used to
write copies of a scenario with fitted values."""

from __future__ import annotations

import re


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    return f"{float(value):.6g}" if not float(value).is_integer() else f"{float(value):.1f}"


def edit_toml(text: str, updates: dict[str, dict], *, keep_comments: bool = True) -> str:
    """Set ``key = value`` in ``[section]`` tables of TOML text, keeping comments and
    layout; keys absent from their section are added at its end, a value of None removes
    the key. Values may be numbers, text, lists or flat dicts (inline tables)."""
    lines = text.splitlines()
    section = None
    last_key_line: dict[str, int] = {}
    found: dict[tuple, tuple[int, int]] = {}
    i = 0
    while i < len(lines):
        stripped = lines[i].strip()
        head = re.match(r"^\[\[?\s*([^\]]+?)\s*\]\]?", stripped)
        if head:
            section = head.group(1) if not stripped.startswith("[[") else None
            i += 1
            continue
        m = re.match(r"^([A-Za-z0-9_\-]+)\s*=\s*(.*)$", stripped)
        if m and section is not None:
            end = i
            value = m.group(2)
            if value.startswith("[") and value.count("[") > value.count("]"):
                depth = value.count("[") - value.count("]")
                while depth > 0 and end + 1 < len(lines):
                    end += 1
                    seg = lines[end].split("#", 1)[0]
                    depth += seg.count("[") - seg.count("]")
            found[(section, m.group(1))] = (i, end)
            last_key_line[section] = end
            i = end + 1
            continue
        i += 1
    replace: dict[int, tuple[int, str]] = {}
    inserts: dict[int, list[str]] = {}
    for sec, kv in updates.items():
        for key, value in kv.items():
            if value is None:
                if (sec, key) in found:
                    start, end = found[(sec, key)]
                    replace[start] = (end, None)
                continue
            new = f"{key} = {toml_value(value)}"
            if (sec, key) in found:
                start, end = found[(sec, key)]
                comment = ""
                if keep_comments and start == end and "#" in lines[start] \
                        and not isinstance(value, dict):
                    val_part = lines[start].split("=", 1)[1]
                    if val_part.count('"') % 2 == 0 and "#" in val_part:
                        comment = "  # " + val_part.split("#", 1)[1].strip()
                replace[start] = (end, new.ljust(32) + comment if comment else new)
            elif sec in last_key_line:
                inserts.setdefault(last_key_line[sec], []).append(new)
            else:
                inserts.setdefault(len(lines) - 1, []).extend(["", f"[{sec}]", new])
    out = []
    i = 0
    while i < len(lines):
        if i in replace:
            end, new = replace[i]
            if new is not None:
                out.append(new)
            for extra in range(i, end + 1):
                out.extend(inserts.get(extra, []))
            i = end + 1
            continue
        out.append(lines[i])
        out.extend(inserts.get(i, []))
        i += 1
    return "\n".join(out) + "\n"


