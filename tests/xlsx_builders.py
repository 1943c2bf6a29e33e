"""Hand-made XLSX files for the intake guards: a minimal valid workbook around any sheet XML, and zip bombs."""
from __future__ import annotations

import io
import zipfile

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"
_DOC_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_XML = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'


def workbook(sheet_xml: str, *, sheet_part: str = "xl/worksheets/sheet1.xml", sheet_name: str = "Sheet1",
             extra: dict[str, bytes] | None = None) -> bytes:
    """A minimal valid .xlsx ([Content_Types].xml, _rels/.rels, workbook, its rels, one sheet)."""
    target = sheet_part.removeprefix("xl/")
    parts = {
        "[Content_Types].xml": (
            f'{_XML}<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
            '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
            '<Default Extension="xml" ContentType="application/xml"/>'
            '<Override PartName="/xl/workbook.xml" ContentType="application/vnd.openxmlformats-officedocument.'
            'spreadsheetml.sheet.main+xml"/>'
            f'<Override PartName="/{sheet_part}" ContentType="application/vnd.openxmlformats-officedocument.'
            'spreadsheetml.worksheet+xml"/></Types>'),
        "_rels/.rels": (
            f'{_XML}<Relationships xmlns="{_REL_NS}"><Relationship Id="rId1" '
            f'Type="{_DOC_REL}/officeDocument" Target="xl/workbook.xml"/></Relationships>'),
        "xl/workbook.xml": (
            f'{_XML}<workbook xmlns="{MAIN_NS}" xmlns:r="{_DOC_REL}"><sheets>'
            f'<sheet name="{sheet_name}" sheetId="1" r:id="rId1"/></sheets></workbook>'),
        "xl/_rels/workbook.xml.rels": (
            f'{_XML}<Relationships xmlns="{_REL_NS}"><Relationship Id="rId1" Type="{_DOC_REL}/worksheet" '
            f'Target="{target}"/></Relationships>'),
        sheet_part: sheet_xml,
    }
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, text in parts.items():
            zf.writestr(name, text)
        for name, data in (extra or {}).items():
            zf.writestr(name, data)
    return buf.getvalue()


def sheet(rows_xml: str, dimension: str | None = None) -> str:
    dim = f'<dimension ref="{dimension}"/>' if dimension else ""
    return f'{_XML}<worksheet xmlns="{MAIN_NS}">{dim}<sheetData>{rows_xml}</sheetData></worksheet>'


def one_cell_at_the_end(dimension: str | None = "A1:XFD1048576") -> bytes:
    """The issue's file: one value in the last cell of a sheet (XFD1048576), about 1.5 KB."""
    return workbook(sheet('<row r="1048576"><c r="XFD1048576"><v>1</v></c></row>', dimension))


def table(header: list[str], rows: list[list[float]]) -> str:
    """Sheet XML of a small table: a header row of inline strings, then numbers."""
    def col(j: int) -> str:
        out = ""
        j += 1
        while j:
            j, r = divmod(j - 1, 26)
            out = chr(65 + r) + out
        return out

    xml = ['<row r="1">' + "".join(f'<c r="{col(j)}1" t="inlineStr"><is><t>{h}</t></is></c>'
                                   for j, h in enumerate(header)) + "</row>"]
    for i, row in enumerate(rows, start=2):
        xml.append(f'<row r="{i}">' + "".join(f'<c r="{col(j)}{i}"><v>{v}</v></c>' for j, v in enumerate(row))
                   + "</row>")
    return "".join(xml)


def zip_bomb(unpacked_bytes: int, *, chunk: int = 1 << 20) -> bytes:
    """A workbook with one extra part of ``unpacked_bytes`` zeros, written in chunks (little memory)."""
    base = workbook(sheet(table(["Q1", "Q2"], [[1, 2], [2, 3], [3, 4]])))
    buf = io.BytesIO(base)
    with zipfile.ZipFile(buf, "a", zipfile.ZIP_DEFLATED) as zf:
        info = zipfile.ZipInfo("xl/media/zeros.bin")
        info.compress_type = zipfile.ZIP_DEFLATED
        with zf.open(info, "w", force_zip64=True) as fh:
            zeros = bytes(chunk)
            left = unpacked_bytes
            while left > 0:
                fh.write(zeros[:min(chunk, left)])
                left -= chunk
    return buf.getvalue()
