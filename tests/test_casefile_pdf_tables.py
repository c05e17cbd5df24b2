"""The case file's record list is laid out in tables of a fixed size (time linear in the
records), with plain cells where text fits and escaped paragraphs where it wraps."""
import io

import pypdf

from service.casefile.pdf import CHUNK, record_tables, render_pdf

from .test_casefile import flagged_cycle


def test_records_in_fixed_size_tables_all_listed_markup_literal(client, keys):
    fid = flagged_cycle(client, keys)
    cf = client.get(f"/v1/facilities/{fid}/cycles/1/casefile.json",
                    headers=keys.header("analyst")).json()
    base = cf["records"]
    n = 2 * CHUNK + 50                     # three tables: CHUNK, CHUNK and 50 rows
    records = []
    for i in range(n):
        r = dict(base[i % len(base)], seq=i + 1, record_id=f"r{i:05d}", evidence=True,
                 void=False)
        records.append(r)
    records[7]["record_id"] = "<i>x</i>"                  # short: a plain cell
    records[8]["record_id"] = "<b>" + "long-" * 12 + "</b>"  # wraps: an escaped paragraph
    pdf = render_pdf({**cf, "records": records})
    text = "".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)
    listing = text[text.index("The records of the cycle in order of receipt"):]
    assert [len(t._cellvalues) for t in record_tables(records)] == [CHUNK + 1, CHUNK + 1, 51]
    squeezed = listing.replace("\n", "")
    assert all(f"r{i:05d}" in squeezed for i in range(n) if i not in (7, 8))
    assert "<i>x</i>" in squeezed and "<b>long-long-" in squeezed   # shown, not read as markup
