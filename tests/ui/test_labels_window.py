"""Writing 384 bag labels (19 pages) from the Labels screen of a real window (issue 18, item 8): the sheet is
written off the UI thread, the bar and the page count ("page 3 of 19") move while frames keep being drawn, the
buttons are off meanwhile, and the finds are marked printed once the file is complete. PDFium (pypdfium2, a
reader that shares no code with reportlab) counts the pages. Screenshots: labels-writing.png, labels-written.png."""

from __future__ import annotations

import re

import pytest

from schema.records import Find
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui


@pytest.fixture
def busy_tablet(tmp_path, demo_site):  # type: ignore[no-untyped-def]
    """The demo tablet holding 384 of its own finds whose labels wait."""
    from tests.helpers import demo_tablet, find_data

    store = demo_tablet(tmp_path / "busy.sqlite", demo_site, last=500)
    with store.atomic():
        for number in range(1, 385):
            store.save_find(find=find_data(demo_site, number=number))
    yield store
    store.close()


def test_384_labels_are_written_with_progress_while_the_screen_stays_live(busy_tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    import pypdfium2 as pdfium

    d = run_app(busy_tablet.path, simulate=True)
    _start_day(d)
    labels = d.nav("labels")
    assert labels.waiting.startswith("384 labels of this tablet's finds waiting: 1, 2, 3")
    d.tap(labels.ids.print_labels)
    assert labels.busy and labels.ids.print_labels.disabled and labels.ids.reprint.disabled
    seen: list[str] = []
    frames = 0
    while labels.busy:
        d.pump(1)  # the UI thread keeps drawing frames while the worker writes
        frames += 1
        if labels.progress_text not in seen:
            seen.append(labels.progress_text)
            if len(seen) == 4:
                d.screenshot(shots, "labels-writing")
        assert frames < 100_000, "the label sheet never finished"
    pages = [int(m.group(1)) for t in seen if (m := re.fullmatch(r"Writing 384 labels: page (\d+) of 19", t))]
    assert len(pages) == len(seen), seen  # every line says how far it got, out of 19 pages
    assert pages == sorted(pages) and pages[0] == 0
    assert len([p for p in pages if 0 < p < 19]) >= 3, seen  # the count moved page by page, frames drawn between
    assert labels.problem == "", labels.problem
    assert labels.printed.startswith("Label sheet written: 384 labels on 19 pages, in "), labels.printed
    assert labels.progress == 100 and not labels.ids.print_labels.disabled
    path = labels.printed.split(", in ")[1].split(". This tablet")[0]
    pdf = pdfium.PdfDocument(path)
    assert len(pdf) == 19
    pdf.close()
    assert all(f.label_printed_at is not None for f in busy_tablet.list(Find))
    assert labels.waiting == "No labels waiting."
    d.screenshot(shots, "labels-written")
