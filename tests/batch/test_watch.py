"""Watching a folder: photos read once their size is stable, stones follow subfolders, clean stop."""

import json

from batchfakes import fake_reader, write_fake_photo

from critline.batch.watch import SUMMARY_NAME, watch_folder
from critline.errors import EXIT_OK, EXIT_REJECTED


class Script:
    """A fake clock and sleep that drop files into the folder at given looks."""

    def __init__(self, events):
        self.t = 0.0
        self.n = 0
        self.events = events

    def clock(self):
        return self.t

    def sleep(self, seconds):
        self.t += seconds
        self.n += 1
        action = self.events.get(self.n)
        if action:
            action()


def test_watch_reads_new_photos_and_follows_stones(tmp_path, fake_core):
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    out = tmp_path / "out"
    src = tmp_path / "src"
    a1 = write_fake_photo(src / "r000_pol0.png", [1.5442])
    a2 = write_fake_photo(src / "r000_pol90.png", [1.5532])
    b1 = write_fake_photo(src / "r000_none.png", [1.7180])
    half = a2.read_bytes()[: len(a2.read_bytes()) // 2]

    def drop(photo, stone, data=None):
        def act():
            (inbox / stone).mkdir(exist_ok=True)
            (inbox / stone / photo.name).write_bytes(photo.read_bytes() if data is None else data)
            (inbox / stone / photo.with_suffix(".json").name).write_text(photo.with_suffix(".json").read_text())
        return act

    script = Script({
        1: drop(a1, "stone-1"),
        3: drop(a2, "stone-1", data=half),   # still being copied ...
        4: drop(a2, "stone-1"),              # ... complete one look later
        7: drop(b1, "stone-2"),
        9: lambda: (inbox / "stone-2" / "broken.jpg").write_bytes(b"\xff\xd8 nothing"),
    })
    lines = []
    code = watch_folder(inbox, out_dir=out, interval=1.0, max_idle=5.0, reader=fake_reader,
                        echo=lines.append, sleep=script.sleep, clock=script.clock)
    text = "\n".join(lines)
    assert code == EXIT_REJECTED  # broken.jpg
    # the half-copied photo was read once, complete (the fake reader would reject half a PNG)
    assert text.count("stone-1/r000_pol90.png: 1.5532") == 1
    assert "rejected" not in text.split("stone-2/broken.jpg")[0]
    # stone headings in order, and the running summary of the stone after each photo
    assert text.index("— stone stone-1 —") < text.index("— stone stone-2 —")
    assert "  stone-1: 2/2 photo(s), RI 1.5442-1.5532, birefringence 0.0090" in text
    assert "stone-2/broken.jpg: rejected" in text
    summary = json.loads((out / SUMMARY_NAME).read_text())
    assert [s["stone"] for s in summary["stones"]] == ["stone-1", "stone-2"]
    assert (out / "report.html").exists() and (out / "report.csv").exists()
    assert len(list((out / "cache").glob("*.json"))) == 4


def test_watch_once_and_ctrl_c_leave_results(tmp_path, fake_core):
    inbox = tmp_path / "inbox"
    write_fake_photo(inbox / "s" / "r000_pol0.png", [1.62])
    out = tmp_path / "out"
    lines = []
    s = Script({})
    assert watch_folder(inbox, out_dir=out, interval=0.5, once=True, reader=fake_reader,
                        echo=lines.append, sleep=s.sleep, clock=s.clock) == EXIT_OK
    assert any("s/r000_pol0.png: 1.6200" in x for x in lines)

    def interrupt():
        raise KeyboardInterrupt

    write_fake_photo(inbox / "s" / "r090_pol0.png", [1.6210])
    s = Script({3: interrupt})
    lines = []
    code = watch_folder(inbox, out_dir=out, interval=0.5, reader=fake_reader,
                        echo=lines.append, sleep=s.sleep, clock=s.clock)
    assert code == EXIT_OK
    assert "stopped; writing what has been read so far" in lines
    # the earlier report is kept; this run's is numbered
    assert (out / "report.json").exists() and (out / "report-2.json").exists()
    doc = json.loads((out / "report-2.json").read_text())
    assert doc["counts"]["cached"] == 1 and doc["counts"]["read"] == 1
