"""The four registries of an xlsx package that gain entries for our sheets: content types, the workbook
part, its relationships and the styles part.

They are read with defusedxml to learn names, ids and namespace prefixes, and edited by inserting text
before a closing tag, so namespace declarations and everything else stay byte for byte; each edit is
checked by parsing the result again. Also the minimal package of a new workbook.

References
----------
ECMA-376 Office Open XML File Formats, 5th edition (2016), Part 1 (workbook, styles) and Part 2 (Open
Packaging Conventions: content types, relationships).
"""

from __future__ import annotations

import re
from pathlib import PurePosixPath
from xml.sax.saxutils import quoteattr as _quoteattr

from defusedxml import ElementTree as SafeET

from wallstress.errors import OutputError
from wallstress.write.xlsx.sheet_xml import MAIN_NS, REL_NS

PKG_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"
CT_NS = "http://schemas.openxmlformats.org/package/2006/content-types"
STRICT_NS = ("http://purl.oclc.org/ooxml/",)
REL_OFFICE_DOCUMENT = REL_NS + "/officeDocument"
REL_WORKSHEET = REL_NS + "/worksheet"
REL_STYLES = REL_NS + "/styles"
CT_WORKSHEET = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
CT_STYLES = "application/vnd.openxmlformats-officedocument.spreadsheetml.styles+xml"
CT_WORKBOOK = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"

# Built-in number formats (ECMA-376 Part 1, 18.8.30): used by id instead of adding a custom one.
_BUILTIN_FORMATS: dict[str, int] = {
    "General": 0,
    "0": 1,
    "0.00": 2,
    "#,##0": 3,
    "#,##0.00": 4,
    "0%": 9,
    "0.00%": 10,
}


class SpliceError(OutputError):
    """The workbook package cannot be spliced safely; the caller should use another writer."""


def _parse(data: bytes, part: str):
    if data is None:
        raise SpliceError(f"the package part {part!r} is missing")
    head = data[:200].lstrip(b"\xef\xbb\xbf")
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise SpliceError(f"{part!r} is UTF-16 XML; this writer edits UTF-8 parts only")
    m = re.match(rb"<\?xml[^>]*encoding=[\"']([^\"']+)", head)
    if m and m.group(1).lower().replace(b"_", b"-") not in (b"utf-8", b"utf8"):
        raise SpliceError(f"{part!r} is encoded as {m.group(1).decode()!r}, not UTF-8")
    try:
        return SafeET.fromstring(data)
    except Exception as exc:  # ParseError, or a DTD/entity defusedxml refuses
        raise SpliceError(f"cannot read the package part {part!r} ({exc})") from exc


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _ns(tag: str) -> str:
    return tag[1:].split("}", 1)[0] if tag.startswith("{") else ""


class _Registries:
    """The four registries: what they hold, and text edits that keep everything else."""

    def __init__(self, members: dict[str, bytes]) -> None:
        self.members = members
        self.names_lower = {n.lower() for n in members}
        self.text: dict[str, str] = {}
        self.expect: dict[str, dict[str, int]] = {}

        rels = _parse(members.get("_rels/.rels"), "_rels/.rels")
        targets = [
            r.get("Target", "")
            for r in rels
            if _local(r.tag) == "Relationship" and r.get("Type") == REL_OFFICE_DOCUMENT
        ]
        if not targets:
            strict = any(str(r.get("Type", "")).startswith(STRICT_NS) for r in rels)
            raise SpliceError(
                "the workbook is in strict Office Open XML, which this writer does not edit; save it "
                "as a standard .xlsx"
                if strict
                else "the package names no workbook part (_rels/.rels); it is not an xlsx workbook"
            )
        self.wb_part = targets[0].lstrip("/")
        parent = str(PurePosixPath(self.wb_part).parent)
        self.wb_dir = "" if parent == "." else parent
        wb_name = PurePosixPath(self.wb_part).name
        self.wb_rels_part = f"{self.wb_dir}/_rels/{wb_name}.rels".lstrip("/")

        wb = _parse(members.get(self.wb_part), self.wb_part)
        if _ns(wb.tag) != MAIN_NS:
            raise SpliceError(
                f"the workbook part uses the namespace {_ns(wb.tag)!r} (strict OOXML or another "
                "format); save it as a standard .xlsx"
            )
        sheets = wb.find(f"{{{MAIN_NS}}}sheets")
        if sheets is None:
            raise SpliceError("the workbook part has no <sheets>; it is not a usable workbook")
        self.sheet_names = [s.get("name", "") for s in sheets]
        self.sheet_ids = [int(s.get("sheetId", "0") or 0) for s in sheets]
        pr = wb.find(f"{{{MAIN_NS}}}workbookPr")
        self.date1904 = pr is not None and pr.get("date1904", "0").lower() in ("1", "true")
        self.n_sheets = len(self.sheet_names)

        wrels = _parse(members.get(self.wb_rels_part), self.wb_rels_part)
        self.rel_ids = [r.get("Id", "") for r in wrels]
        styles = [r.get("Target", "") for r in wrels if r.get("Type") == REL_STYLES]
        self.n_rels = len(self.rel_ids)
        self.styles_part = self._resolve(styles[0]) if styles else None

        ct = _parse(members.get("[Content_Types].xml"), "[Content_Types].xml")
        self.overrides = {o.get("PartName", "").lower() for o in ct if _local(o.tag) == "Override"}
        wb_type = [
            o.get("ContentType", "")
            for o in ct
            if o.get("PartName", "").lower() == "/" + self.wb_part.lower()
        ]
        if any("macroenabled" in t.lower() for t in wb_type) or any(
            n.lower().endswith("vbaproject.bin") for n in members
        ):
            raise SpliceError(
                "the workbook is macro-enabled; an .xlsx copy cannot carry its macros, so write our "
                "sheets to a separate workbook"
            )
        self.n_ct = len(ct)

    def _resolve(self, target: str) -> str:
        if target.startswith("/"):
            return target.lstrip("/")
        parts: list[str] = [p for p in self.wb_dir.split("/") if p]
        for p in target.split("/"):
            if p == "..":
                parts = parts[:-1]
            elif p not in ("", "."):
                parts.append(p)
        return "/".join(parts)

    def _get(self, part: str) -> str:
        if part not in self.text:
            self.text[part] = self.members[part].decode("utf-8-sig")
        return self.text[part]

    def _new_rel_id(self) -> str:
        taken = set(self.rel_ids)
        n = 1 + max([int(m.group(1)) for i in taken if (m := re.fullmatch(r"rId(\d+)", i))] + [0])
        while f"rId{n}" in taken:
            n += 1
        self.rel_ids.append(f"rId{n}")
        return f"rId{n}"

    def _new_part(self, stem: str) -> str:
        folder = f"{self.wb_dir}/worksheets" if stem == "sheet" else self.wb_dir
        n = 1
        while True:
            name = f"{folder}/{stem}{n}.xml".lstrip("/")
            if name.lower() not in self.names_lower and "/" + name.lower() not in self.overrides:
                self.names_lower.add(name.lower())
                return name
            n += 1

    def _bump(self, part: str, key: str, by: int) -> None:
        self.expect.setdefault(part, {})
        self.expect[part][key] = self.expect[part].get(key, 0) + by

    def add_sheets(self, names: list[str]) -> list[str]:
        wb_text = self._get(self.wb_part)
        # the relationships prefix is declared on each new element: some writers bind it only on
        # their own <sheet> elements, so a workbook-level binding cannot be assumed
        r_attr, r_decl = "r:id", f' xmlns:r="{REL_NS}"'
        p = _element_prefix(wb_text, "sheets")
        next_id = max(self.sheet_ids + [0]) + 1
        parts, sheet_xml, rel_xml, ct_xml = [], [], [], []
        for name in names:
            part = self._new_part("sheet")
            rid = self._new_rel_id()
            sheet_xml.append(
                f'<{p}sheet{r_decl} name={_quoteattr(name)} sheetId="{next_id}" {r_attr}="{rid}"/>'
            )
            next_id += 1
            target = part[len(self.wb_dir) + 1 :] if self.wb_dir else part
            rel_xml.append(self._rel(rid, REL_WORKSHEET, target))
            ct_xml.append(self._override(part, CT_WORKSHEET))
            parts.append(part)
        wb_text = _insert_children(wb_text, "sheets", "".join(sheet_xml))
        self._bump(self.wb_part, "sheets", len(names))
        self.text[self.wb_part] = self._print_titles(wb_text, names, p)
        self._add_rels("".join(rel_xml), len(names))
        self._add_overrides("".join(ct_xml), len(names))
        return parts

    def _print_titles(self, wb_text: str, names: list[str], p: str) -> str:
        """Each new sheet prints its header row on every page (a ``_xlnm.Print_Titles`` name
        local to the sheet, by its position among the workbook's sheets)."""
        xml = "".join(
            f'<{p}definedName name="_xlnm.Print_Titles" localSheetId="{self.n_sheets + i}">'
            f"{_escape_text(_quoted_sheet(name))}!$1:$1</{p}definedName>"
            for i, name in enumerate(names)
        )
        if re.search(_OPEN_TAG.format(local="definedNames"), wb_text):
            wb_text = _insert_children(wb_text, "definedNames", xml)
        else:  # a new <definedNames> where the schema puts it: after these, when present
            for local in ("externalReferences", "functionGroups", "sheets"):
                close = list(
                    re.finditer(
                        rf"</{re.escape(p)}{local}\s*>|<{re.escape(p)}{local}(?=[\s/])[^>]*/>",
                        wb_text,
                    )
                )
                if close:
                    end = close[-1].end()
                    wb_text = (
                        wb_text[:end] + f"<{p}definedNames>{xml}</{p}definedNames>" + wb_text[end:]
                    )
                    break
        self._bump(self.wb_part, "definedNames", len(names))
        return wb_text

    def _rel(self, rid: str, rel_type: str, target: str) -> str:
        p = _element_prefix(self._get(self.wb_rels_part), "Relationships")
        return f'<{p}Relationship Id="{rid}" Type="{rel_type}" Target={_quoteattr(target)}/>'

    def _override(self, part: str, ctype: str) -> str:
        p = _element_prefix(self._get("[Content_Types].xml"), "Types")
        return f'<{p}Override PartName={_quoteattr("/" + part)} ContentType="{ctype}"/>'

    def _add_rels(self, xml: str, n: int) -> None:
        text = self._get(self.wb_rels_part)
        self.text[self.wb_rels_part] = _insert_children(text, "Relationships", xml)
        self._bump(self.wb_rels_part, "", n)

    def _add_overrides(self, xml: str, n: int) -> None:
        text = self._get("[Content_Types].xml")
        self.text["[Content_Types].xml"] = _insert_children(text, "Types", xml)
        self._bump("[Content_Types].xml", "", n)

    def add_styles(self, formats: list[str]) -> dict[str, int]:
        if self.styles_part is None:  # a package without a styles part: give it ours
            self.styles_part = self._new_part("styles")
            self.members[self.styles_part] = None
            self.text[self.styles_part] = _MINIMAL_STYLES
            target = self.styles_part[len(self.wb_dir) + 1 :] if self.wb_dir else self.styles_part
            self._add_rels(self._rel(self._new_rel_id(), REL_STYLES, target), 1)
            self._add_overrides(self._override(self.styles_part, CT_STYLES), 1)
        part = self.styles_part
        if part not in self.members:
            raise SpliceError(f"the styles part {part!r} named by the workbook is missing")
        root = _parse(self.text[part].encode() if part in self.text else self.members[part], part)
        if _ns(root.tag) != MAIN_NS:
            raise SpliceError(f"the styles part uses the namespace {_ns(root.tag)!r}")
        found = {_local(c.tag): c for c in root}
        for needed in ("fonts", "cellXfs"):
            if needed not in found or not len(found[needed]):
                raise SpliceError(f"the styles part has no usable <{needed}>; cannot add formats")
        text = self._get(part)
        p = _element_prefix(text, "styleSheet")
        font_id = len(found["fonts"])
        xf_base = len(found["cellXfs"])
        has_style_xf = "cellStyleXfs" in found and len(found["cellStyleXfs"])
        xf_id = ' xfId="0"' if has_style_xf else ""

        # numFmts: built-ins by id, others as new custom ids after the largest in use
        existing = [int(e.get("numFmtId", "0")) for e in found.get("numFmts", [])]
        next_fmt = max(existing + [163]) + 1
        fmt_ids, fmt_xml = {}, []
        for code in formats:
            if code in _BUILTIN_FORMATS:
                fmt_ids[code] = _BUILTIN_FORMATS[code]
            else:
                fmt_ids[code] = next_fmt
                fmt_xml.append(f'<{p}numFmt numFmtId="{next_fmt}" formatCode={_quoteattr(code)}/>')
                next_fmt += 1
        if fmt_xml:
            if "numFmts" in found:
                text = _insert_children(text, "numFmts", "".join(fmt_xml), len(fmt_xml))
            else:
                text = _insert_first_child(
                    text,
                    "styleSheet",
                    f'<{p}numFmts count="{len(fmt_xml)}">{"".join(fmt_xml)}</{p}numFmts>',
                )
            self._bump(part, "numFmts", len(fmt_xml))

        text = _insert_children(text, "fonts", _bold_font(found["fonts"][0], p), 1)
        self._bump(part, "fonts", 1)
        xfs = [
            f'<{p}xf numFmtId="0" fontId="{font_id}" fillId="0" borderId="0"{xf_id} applyFont="1"/>',
            f'<{p}xf numFmtId="0" fontId="0" fillId="0" borderId="0"{xf_id} quotePrefix="1"/>',
        ]
        ids = {"header": xf_base, "text_quoted": xf_base + 1}
        for code in formats:
            ids[code] = xf_base + len(xfs)
            xfs.append(
                f'<{p}xf numFmtId="{fmt_ids[code]}" fontId="0" fillId="0" borderId="0"{xf_id} '
                'applyNumberFormat="1"/>'
            )
        text = _insert_children(text, "cellXfs", "".join(xfs), len(xfs))
        self._bump(part, "cellXfs", len(xfs))
        # the differential formats of our conditional marks (after any of the workbook's own)
        dxfs = [
            f'<{p}dxf><font><b/></font><fill><patternFill patternType="solid">'
            f'<bgColor rgb="{rgb}"/></patternFill></fill></{p}dxf>'
            for rgb in MARK_FILLS.values()
        ]
        dxf_base = len(found["dxfs"]) if "dxfs" in found else 0
        if "dxfs" in found:
            text = _insert_children(text, "dxfs", "".join(dxfs), len(dxfs))
        else:  # where the schema puts it: after cellStyles (or cellXfs)
            after = "cellStyles" if "cellStyles" in found else "cellXfs"
            close = re.search(rf"</{re.escape(p)}{after}\s*>|<{re.escape(p)}{after}\b[^>]*/>", text)
            if close is None:
                raise SpliceError(f"no <{after}> element found where expected")
            element = f'<{p}dxfs count="{len(dxfs)}">{"".join(dxfs)}</{p}dxfs>'
            text = text[: close.end()] + element + text[close.end() :]
        self._bump(part, "dxfs", len(dxfs))
        for k, key in enumerate(MARK_FILLS):
            ids[f"dxf:{key}"] = dxf_base + k
        self.text[part] = text
        return ids

    def edited(self) -> dict[str, bytes]:
        """The edited parts as UTF-8 bytes, each checked by parsing it and counting its entries."""
        out = {}
        for part, text in self.text.items():
            data = text.encode("utf-8")
            root = _parse(data, part)
            original = self.members.get(part)
            if original is not None:
                old = _parse(original, part)
                for key, added in self.expect.get(part, {}).items():
                    now = len(root) if key == "" else len(_child(root, key))
                    was = len(old) if key == "" else len(_child(old, key))
                    if now != was + added:
                        raise SpliceError(
                            f"editing {part!r} did not give the expected entries; not spliced"
                        )
            out[part] = data
        return out


def _quoted_sheet(name: str) -> str:
    """A sheet name as a formula refers to it: in single quotes, a quote inside doubled."""
    return "'" + name.replace("'", "''") + "'"


def _escape_text(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _child(root, local: str):
    for c in root:
        if _local(c.tag) == local:
            return c
    return []


_OPEN_TAG = r"<(?P<prefix>(?:[\w.-]+:)?){local}(?=[\s/>])(?P<attrs>[^>]*?)(?P<empty>/?)>"


def _element_prefix(text: str, local: str) -> str:
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None:
        raise SpliceError(f"no <{local}> element found where expected")
    return m.group("prefix")


def _insert_children(text: str, local: str, xml: str, n_new: int = 0) -> str:
    """``xml`` appended as the last children of the first ``<local>`` element.

    A ``count`` attribute on the element, when there is one, grows by ``n_new``.
    """
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None:
        raise SpliceError(f"no <{local}> element found where expected")
    prefix, attrs = m.group("prefix"), m.group("attrs")
    if n_new:
        attrs = _bump_count(attrs, n_new)
    if m.group("empty"):
        new_open = f"<{prefix}{local}{attrs}>{xml}</{prefix}{local}>"
        return text[: m.start()] + new_open + text[m.end() :]
    close = re.compile(rf"</{re.escape(prefix)}{re.escape(local)}\s*>")
    c = close.search(text, m.end())
    if c is None:
        raise SpliceError(f"<{local}> is not closed")
    return (
        text[: m.start()]
        + f"<{prefix}{local}{attrs}>"
        + text[m.end() : c.start()]
        + xml
        + text[c.start() :]
    )


def _bump_count(attrs: str, n: int) -> str:
    m = re.search(r'(\scount\s*=\s*["\'])(\d+)(["\'])', attrs)
    if m is None:
        return attrs
    return attrs[: m.start()] + f"{m.group(1)}{int(m.group(2)) + n}{m.group(3)}" + attrs[m.end() :]


def _insert_first_child(text: str, local: str, xml: str) -> str:
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None or m.group("empty"):
        raise SpliceError(f"no <{local}> element with content found")
    return text[: m.end()] + xml + text[m.end() :]


def _bold_font(font0, p: str) -> str:
    """The workbook's default font (its size, colour, name...) with bold added."""
    parts = [f"<{p}b/>"]
    for child in font0:
        local = _local(child.tag)
        if local in ("b", "extLst") or _ns(child.tag) != MAIN_NS:
            continue
        attrs = "".join(f" {k}={_quoteattr(v)}" for k, v in child.attrib.items() if "}" not in k)
        parts.append(f"<{p}{local}{attrs}/>")
    return f"<{p}font>{''.join(parts)}</{p}font>"


# Fills of the conditional marks on our sheets: light tints of the Okabe-Ito colour-blind-safe
# palette (Okabe M, Ito K, Color Universal Design, 2002, as in figures.common): sky blue for a value beyond the
# reference limit, orange for a row with an error finding (told apart in every common colour
# vision deficiency; the legend on the sheet says which is which).
MARK_FILLS = {"limit": "FFBFE3F7", "error": "FFF9D9A6"}

_MINIMAL_STYLES = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    f'<styleSheet xmlns="{MAIN_NS}">'
    '<fonts count="1"><font><sz val="11"/><name val="Calibri"/><family val="2"/></font></fonts>'
    '<fills count="2"><fill><patternFill patternType="none"/></fill>'
    '<fill><patternFill patternType="gray125"/></fill></fills>'
    '<borders count="1"><border><left/><right/><top/><bottom/><diagonal/></border></borders>'
    '<cellStyleXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0"/></cellStyleXfs>'
    '<cellXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0"/></cellXfs>'
    '<cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0"/></cellStyles>'
    "</styleSheet>"
)


def _minimal_package() -> dict[str, bytes]:
    decl = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    return {
        "[Content_Types].xml": (
            f'{decl}<Types xmlns="{CT_NS}">'
            '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
            'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/>'
            f'<Override PartName="/xl/workbook.xml" ContentType="{CT_WORKBOOK}"/>'
            f'<Override PartName="/xl/styles.xml" ContentType="{CT_STYLES}"/></Types>'
        ).encode(),
        "_rels/.rels": (
            f'{decl}<Relationships xmlns="{PKG_REL_NS}">'
            f'<Relationship Id="rId1" Type="{REL_OFFICE_DOCUMENT}" Target="xl/workbook.xml"/>'
            "</Relationships>"
        ).encode(),
        "xl/workbook.xml": (
            f'{decl}<workbook xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">'
            '<bookViews><workbookView activeTab="0"/></bookViews><sheets></sheets></workbook>'
        ).encode(),
        "xl/_rels/workbook.xml.rels": (
            f'{decl}<Relationships xmlns="{PKG_REL_NS}">'
            f'<Relationship Id="rId1" Type="{REL_STYLES}" Target="styles.xml"/></Relationships>'
        ).encode(),
        "xl/styles.xml": _MINIMAL_STYLES.encode(),
    }
