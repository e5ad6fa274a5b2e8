"""Reading a PDF back in tests: its text per page (pypdf), the fonts and
sizes the text is drawn in, and table rows sliced by their first cell."""

import io

from pypdf import PdfReader


def reader(data):
    return PdfReader(io.BytesIO(data))


def page_texts(data):
    return [p.extract_text() for p in reader(data).pages]


def drawn_text(data):
    """[(page number from 1, text, font BaseFont, size in points)] of every non-blank piece."""
    out = []
    for n, page in enumerate(reader(data).pages, start=1):
        def visit(text, cm, tm, font, size, n=n):
            if text.strip():
                scale = abs(tm[0] * cm[0]) if tm and cm else 1.0
                out.append((n, text, (font or {}).get("/BaseFont", ""), size * scale))
        page.extract_text(visitor_text=visit)
    return out


def rows_by_first_cell(lines, keys):
    """{key: the lines from the line equal to ``key`` up to the next key's line}."""
    keys = list(keys)
    at = {}
    wanted = set(keys)
    for i, line in enumerate(lines):
        if line.strip() in wanted and line.strip() not in at:
            at[line.strip()] = i
    order = sorted(at.items(), key=lambda kv: kv[1])
    out = {}
    for j, (key, start) in enumerate(order):
        end = order[j + 1][1] if j + 1 < len(order) else len(lines)
        out[key] = lines[start:end]
    return out
