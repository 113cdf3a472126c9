"""Linking the translation units of one library: the model split into parts built side by side.

``templates/model.c.j2`` renders either the whole model (``lyacomp emit``) or one part of
it. Every function of a part is ``static``, as in the whole model, except those another
part calls: their definition and declarations lose ``static`` (the build hides them with
``-fvisibility=hidden``, so the library still exports nothing but its entry points), and
the calling part gets their prototype, copied from the definition, and a copy of the
enum constants and ``static const`` tables of other parts that it uses. A part thus
compiles on its own and inlines everything it owns, exactly as the whole model does.
Types are not copied: a part needs its typedefs in the shared head or in its own stages.
"""

from __future__ import annotations

import re
from collections.abc import Mapping

from ..errors import InternalError

IMPORTS_MARKER = "/* (the prototypes of functions of the other parts go here) */"
"""The line ``model.c.j2`` renders where a part's prototypes are inserted."""

_COMMENT = re.compile(r"/\*.*?\*/|//[^\n]*", re.S)
_ENUM = re.compile(r"^enum\s*\{(.*?)\};\n", re.S | re.M)
_ENUMERATOR = re.compile(r"(?:^|,)\s*([A-Za-z_]\w*)\s*(?==|,|$)", re.S)
_TABLE = re.compile(r"^static\s+const\s+[^;=(){}]*?\b(\w+)\s*\[[^\]]*\]\s*=\s*\{[^;]*\};\n", re.M)


def _blank_comments(text: str) -> str:
    """``text`` with comments replaced by spaces (newlines kept): positions stay valid."""
    return _COMMENT.sub(lambda m: re.sub(r"[^\n]", " ", m.group(0)), text)


def _closing(code: str, start: int) -> int:
    """The index just past the parenthesis that closes the one at ``start``."""
    depth = 0
    for i in range(start, len(code)):
        if code[i] == "(":
            depth += 1
        elif code[i] == ")":
            depth -= 1
            if depth == 0:
                return i + 1
    raise InternalError("unbalanced parentheses in the generated C")


class _Part:
    """The static functions a rendered part defines and declares, and the names it uses."""

    def __init__(self, text: str, prefix: str) -> None:
        self.text = text
        code = _blank_comments(text)
        head = re.compile(
            rf"^static\s+(?:inline\s+)?[^;{{}}()=#]*?\b({re.escape(prefix)}_\w+)\s*\(", re.M
        )
        self.definitions: dict[str, tuple[int, int]] = {}
        """name -> (start of the line, end of the parameter list)"""
        self.declarations: dict[str, list[int]] = {}
        for match in head.finditer(code):
            end = _closing(code, match.end() - 1)
            follow = code[end:].lstrip()[:1]
            name = match.group(1)
            if follow == "{":
                if name in self.definitions:
                    raise InternalError(f"{name} is defined twice in one part")
                self.definitions[name] = (match.start(), end)
            elif follow == ";":
                self.declarations.setdefault(name, []).append(match.start())
        self.used = set(re.findall(r"\b([A-Za-z_]\w*)\b", code))
        self.blocks: dict[str, str] = {}
        """enum constants and static const tables -> the text that defines them"""
        for match in _ENUM.finditer(code):
            block = text[match.start() : match.end()]
            for constant in _ENUMERATOR.findall(match.group(1)):
                self.blocks[constant] = block
        for match in _TABLE.finditer(code):
            if match.group(1).startswith(f"{prefix}_"):
                self.blocks[match.group(1)] = text[match.start() : match.end()]

    def prototype(self, name: str) -> str:
        start, end = self.definitions[name]
        return _without_static(self.text[start:end]) + ";"


def _without_static(line: str) -> str:
    return re.sub(r"^static\s+(?:inline\s+)?", "", line)


def link_parts(texts: Mapping[str, str], prefix: str) -> dict[str, str]:
    """The parts (name -> rendered C) with the functions they share given external
    linkage and their prototypes inserted where each part renders :data:`IMPORTS_MARKER`."""
    parts = {name: _Part(text, prefix) for name, text in texts.items()}
    owner: dict[str, str] = {}
    for name, part in parts.items():
        for function in part.definitions:
            if function in owner:
                raise InternalError(f"{function} is defined in parts {owner[function]} and {name}")
            owner[function] = name
    shared = {
        function
        for name, part in parts.items()
        for function in part.used
        if function in owner and owner[function] != name
    }
    linked = {}
    for name, part in parts.items():
        starts = sorted(
            [part.definitions[f][0] for f in shared if f in part.definitions]
            + [s for f in shared for s in part.declarations.get(f, ())]
        )
        text = part.text
        for start in reversed(starts):  # from the end: earlier positions stay valid
            line_end = text.find("\n", start)
            text = text[:start] + _without_static(text[start:line_end]) + text[line_end:]
        imports = sorted(
            f for f in shared if f in part.used and owner[f] != name and f not in part.declarations
        )
        copied: list[str] = []  # constants and tables of other parts, in their order there
        for other_name, other in parts.items():
            for constant, text_block in other.blocks.items():
                wanted = constant in part.used and constant not in part.blocks
                if other_name != name and wanted and text_block not in copied:
                    copied.append(text_block)
        block = "".join(copied) + "".join(f"{parts[owner[f]].prototype(f)}\n" for f in imports)
        if text.count(IMPORTS_MARKER) != 1:
            raise InternalError(f"part {name} does not render the prototypes' place exactly once")
        note = "/* From the other translation units of this library. */\n" if block else ""
        linked[name] = text.replace(IMPORTS_MARKER + "\n", note + block)
    return linked
