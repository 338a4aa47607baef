"""Power loss on the tablet: the store's own SQL and pragmas replayed through a VFS that cuts the power.

With WAL and ``synchronous=FULL`` (the store's settings) no trial may leave a corrupt file or lose a find the
recorder was told was saved. The same harness with the journal off must see corruption, which proves it can
see failure at all. See ``tests/powercut.py`` for the disk model.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

pytest.importorskip("apsw", reason="the power-loss harness needs apsw (in the test extra)")

from tests import powercut  # noqa: E402
from tests.helpers import demo_tablet, find_data  # noqa: E402
from mobile.store import TABLET_PRAGMAS, TabletStore  # noqa: E402
from schema.db import SQLITE_PRAGMAS  # noqa: E402
from schema.demo_site import DemoSite  # noqa: E402

TRIALS = int(os.environ.get("BAULK_POWERCUT_TRIALS", "300"))
FINDS = 12


def _pragmas(journal: str) -> list[tuple[str, str]]:
    return [(k, journal if k == "journal_mode" else v) for k, v in (*SQLITE_PRAGMAS, *TABLET_PRAGMAS)]


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, powercut.Trace]:
    """A store file with the site set up (the starting point) and the trace of saving finds into it."""
    from schema.demo_site import build_site

    demo: DemoSite = build_site()
    folder = tmp_path_factory.mktemp("powercut")
    seeded = folder / "seed" / "tablet.sqlite"
    store = demo_tablet(seeded, demo, last=500)
    store.close()  # checkpointed: one file, no WAL
    base = folder / "base" / "tablet.sqlite"
    base.parent.mkdir()
    shutil.copy(seeded, base)

    def work(ack):  # type: ignore[no-untyped-def]
        s = TabletStore.open(seeded)
        for i in range(FINDS):
            saved = s.save_find(find=find_data(demo, number=s.next_find_number(), e=1000.5 + i * 0.1,
                                               photo_hashes=[f"{i:02d}" * 32]))
            ack(saved.id)
            if i % 5 == 4:
                s.void_find(find_id=saved.id, reason="double entry")
        s.close()

    return base, powercut.record_trace(work)


def test_trace_replays_cleanly_without_a_cut(recorded, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    base, trace = recorded
    assert len(trace.acks()) == FINDS
    out = powercut.run_trial(base, trace, tmp_path, seed=0, cut_range=None, pragmas=_pragmas("WAL"))
    assert out.integrity == "ok" and out.lost == [] and out.acked == trace.acks()
    # the replayed file holds what the real store wrote
    import sqlite3

    with sqlite3.connect(tmp_path / "after" / base.name) as raw:
        assert raw.execute("SELECT count(*) FROM find").fetchone() == (FINDS,)
        assert raw.execute("SELECT count(*) FROM find WHERE voided").fetchone() == (FINDS // 5,)


@pytest.mark.slow
def test_wal_full_survives_every_power_cut(recorded, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    base, trace = recorded
    outcomes = list(powercut.trials(base, trace, tmp_path, n=TRIALS, pragmas=_pragmas("WAL")))
    corrupt = [o for o in outcomes if o.corrupt]
    lost = [o for o in outcomes if o.lost]
    assert len(outcomes) >= min(TRIALS, 300)
    assert not corrupt, f"{len(corrupt)} of {len(outcomes)} trials left a corrupt file: {corrupt[0]}"
    assert not lost, f"{len(lost)} trials lost acknowledged finds: {lost[0]}"
    # the cuts really fell among the saves: most trials had some finds acknowledged and some not
    assert sum(0 < len(o.acked) < FINDS for o in outcomes) > len(outcomes) // 2


@pytest.mark.slow
def test_the_harness_sees_corruption_with_the_journal_off(recorded, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    base, trace = recorded
    outcomes = list(powercut.trials(base, trace, tmp_path, n=TRIALS, pragmas=_pragmas("OFF")))
    bad = [o for o in outcomes if o.corrupt or o.lost]
    assert bad, "with no journal some power cuts must corrupt the file or lose a save; the harness saw none"


@pytest.mark.slow
def test_the_harness_sees_lost_saves_without_sync(recorded, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """WAL with ``synchronous=OFF`` keeps the file sound but forgets saves already acknowledged: the
    lost-find check has teeth too."""
    base, trace = recorded
    pragmas = [(k, "OFF" if k == "synchronous" else v) for k, v in (*SQLITE_PRAGMAS, *TABLET_PRAGMAS)]
    outcomes = list(powercut.trials(base, trace, tmp_path, n=min(TRIALS, 100), pragmas=pragmas))
    assert any(o.lost for o in outcomes), "with no fsync some acknowledged saves must be lost; the harness saw none"


# -- photos: the file and its record ------------------------------------------------------------------------------
PHOTOS = 6


@pytest.fixture(scope="module")
def recorded_photos(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, powercut.Trace]:
    """A store with the site set up, and the trace of saving finds and keeping a photo of each (the photo file's
    disk steps recorded among the SQL, in ``mobile.photos.keep_file``'s order)."""
    import io
    import random

    from PIL import Image

    from mobile.photos import save_photo
    from schema.demo_site import build_site

    demo: DemoSite = build_site()
    folder = tmp_path_factory.mktemp("powercut-photos")
    seeded = folder / "seed" / "tablet.sqlite"
    demo_tablet(seeded, demo, last=500).close()
    base = folder / "base" / "tablet.sqlite"
    base.parent.mkdir()
    shutil.copy(seeded, base)

    def work(ack):  # type: ignore[no-untyped-def]
        s = TabletStore.open(seeded)
        for i in range(PHOTOS):
            found = s.save_find(find=find_data(demo, number=s.next_find_number(), e=1000.5 + i * 0.1))
            ack(found.id)
            jpeg = io.BytesIO()  # about 5 KB: ten sectors and more, so a file can be kept in part
            Image.frombytes("RGB", (48, 32), random.Random(i).randbytes(48 * 32 * 3)).save(jpeg, "JPEG", quality=90)
            photo = save_photo(s, data=jpeg.getvalue(), subject="find", subject_id=found.id, site_id=demo.site.id,
                               by="AK")
            ack(photo.id, kind="photo")
        s.close()

    return base, powercut.record_trace(work, root=seeded.parent)


def test_the_photo_trace_holds_the_file_steps_before_the_records_commit(recorded_photos, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    base, trace = recorded_photos
    kinds = [s[0] for s in trace.steps]
    assert kinds.count("pwrite") == kinds.count("psync") == kinds.count("prename") == kinds.count("pdirsync") == PHOTOS
    # every photo's file is written, flushed, renamed and its folder flushed, in that order, before the INSERT of
    # its record and that transaction's commit
    inserts = [i for i, s in enumerate(trace.steps) if s[0] == "sql" and s[1].startswith("INSERT INTO photo ")]
    dirsyncs = [i for i, k in enumerate(kinds) if k == "pdirsync"]
    assert len(inserts) == PHOTOS and all(d < i for d, i in zip(dirsyncs, inserts))
    out = powercut.run_trial(base, trace, tmp_path, seed=0, cut_range=None, pragmas=_pragmas("WAL"))
    assert out.integrity == "ok" and out.lost == [] and out.broken_photos == [] and out.orphan_files == 0
    assert out.photos_acked == trace.photo_acks() and len(out.photos_acked) == PHOTOS
    assert len(out.file_ops) == 4 * PHOTOS
    import sqlite3

    with sqlite3.connect(tmp_path / "after" / base.name) as raw:  # each photo of a find is listed on its find
        linked = raw.execute("SELECT count(*) FROM photo JOIN find ON find.id = photo.subject_id "
                             "WHERE instr(find.photo_hashes, photo.sha256) > 0").fetchone()
    assert linked == (PHOTOS,)


def test_a_cut_at_every_photo_file_step_leaves_both_or_neither(recorded_photos, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """Each of the photo file's steps, and the operation after it, as the cut point (a few seeds each, for the
    random part of what the disk keeps): no record without its whole file, no acknowledged photo lost."""
    base, trace = recorded_photos
    dry = powercut.run_trial(base, trace, tmp_path, seed=0, cut_range=None, pragmas=_pragmas("WAL"))
    points = sorted({op + k for op in dry.file_ops for k in (0, 1)})
    outcomes = [powercut.run_trial(base, trace, tmp_path, seed=seed, cut_range=(at, at), pragmas=_pragmas("WAL"))
                for at in points for seed in (1, 2)]
    assert [o.cut_at for o in outcomes] == [at for at in points for _ in (1, 2)]
    bad = [o for o in outcomes if o.corrupt or o.lost or o.broken_photos]
    assert not bad, f"{len(bad)} of {len(outcomes)} cuts at photo steps went wrong: {bad[0]}"
    # the cuts fell between photos: some trials kept a photo whole with no record yet (a harmless orphan file)
    assert any(o.orphan_files for o in outcomes) and any(0 < len(o.photos_acked) < PHOTOS for o in outcomes)


def test_the_harness_sees_a_record_without_its_file_when_the_order_is_wrong(recorded_photos, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """Two controls that must fail: the record committed before its file is written, and the file never flushed."""
    base, trace = recorded_photos
    for broken in (powercut.record_before_file(trace), powercut.without_flushes(trace)):
        dry = powercut.run_trial(base, broken, tmp_path, seed=0, cut_range=None, pragmas=_pragmas("WAL"))
        points = sorted({op + k for op in dry.file_ops for k in (0, 1)})
        outcomes = [powercut.run_trial(base, broken, tmp_path, seed=1, cut_range=(at, at), pragmas=_pragmas("WAL"))
                    for at in points]
        assert any(o.broken_photos for o in outcomes), "the harness saw no photo record without its whole file"


@pytest.mark.slow
def test_wal_full_keeps_photos_and_records_together_under_random_cuts(recorded_photos, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    base, trace = recorded_photos
    outcomes = list(powercut.trials(base, trace, tmp_path, n=TRIALS, pragmas=_pragmas("WAL")))
    bad = [o for o in outcomes if o.corrupt or o.lost or o.broken_photos]
    assert not bad, f"{len(bad)} of {len(outcomes)} trials went wrong: {bad[0]}"
    assert sum(0 < len(o.photos_acked) < PHOTOS for o in outcomes) > len(outcomes) // 2
