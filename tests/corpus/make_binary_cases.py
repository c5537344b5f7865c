"""Write the corpus files that are not plain UTF-8 text (byte-order marks, other encodings,
workbooks). Run from anywhere: ``python tests/corpus/make_binary_cases.py``; the files are
committed, this script says how they were made. Content invented."""
from __future__ import annotations

import io
import zipfile
from pathlib import Path

HERE = Path(__file__).parent
TABLE = ("specimen,strength,origin\nE1,412,inclusión\nE2,455,pore\nE3,398,inclusión\nE4,501,pore\n"
         "E5,433,pore\n")


def write(name: str, data: bytes) -> None:
    path = HERE / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(data)


def workbook(sheets: dict[str, list[list]]) -> bytes:
    import openpyxl

    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        sheet = book.create_sheet(name)
        for row in rows:
            sheet.append(row)
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def main() -> None:
    write("encoding/utf8_bom.csv", b"\xef\xbb\xbf" + TABLE.encode("utf-8"))
    write("encoding/utf16_le_bom.csv", TABLE.encode("utf-16"))            # Python writes LE with a BOM
    write("encoding/utf16_be_bom.csv", b"\xfe\xff" + TABLE.encode("utf-16-be"))
    write("encoding/utf16_no_bom.csv", TABLE.encode("utf-16-le"))
    write("encoding/latin1.csv", TABLE.encode("latin-1"))
    write("encoding/utf8_bom_semicolon.csv", b"\xef\xbb\xbf" + TABLE.replace(",", ";").encode("utf-8"))
    bars = [["specimen", "strength (MPa)", "origin", "status"], ["W1", 412.5, "pore", "failed"],
            ["W2", 455, "inclusion", "failed"], ["W3", 398, "pore", "failed"], ["W4", 520, None, "survived"],
            ["W5", 433, "n.d.", "failed"]]
    notes = [["campaign", "operator"], ["lot 7", "AB"]]
    write("excel/two_sheets.xlsx", workbook({"Notes": notes, "Bars": bars}))
    write("excel/bad_cell.xlsx", workbook({"Bars": [[None], [None]] + bars[:3] + [["W3", "n/a", "pore", "failed"]]}))
    good = workbook({"Bars": bars})
    write("excel/truncated.xlsx", good[: len(good) // 2])
    write("excel/text_named_xlsx.xlsx", TABLE.encode("utf-8"))
    damaged = io.BytesIO()
    with zipfile.ZipFile(damaged, "w") as z:
        z.writestr("hello.txt", "not a workbook")
    write("excel/zip_not_workbook.xlsx", damaged.getvalue())
    write("excel/empty_sheet.xlsx", workbook({"Empty": [], "Bars": bars}))
    write("excel/title_rows.xlsx", workbook({"Bars": [["Flexure campaign, lot 7"], ["operator", "JB"], [None]] + bars}))


if __name__ == "__main__":
    main()
