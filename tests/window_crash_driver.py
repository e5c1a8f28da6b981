"""Child process of the crash-recovery test: work in the window, then die; or start again and recover.

``python tests/window_crash_driver.py work STUDY INTERVAL`` opens STUDY,
draws a disk on slice after slice (Extend, then Commit outline), one every
0.4 s, printing one JSON line per edit with its time and the disk's mask
hash, and kills itself (SIGKILL: no clean-up runs) after the last one.
``python tests/window_crash_driver.py recover`` starts a window, recovers
the file the dead one left, and prints what came back. Settings and
recovery files go where XDG_CONFIG_HOME and XDG_DATA_HOME point.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sys
import time

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def wait(app, condition, timeout: float = 60.0) -> None:
    end = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > end:
            raise TimeoutError("the window did not finish in time")
        app.processEvents()
        time.sleep(0.005)


def digest(mask) -> str:
    return hashlib.sha256(mask.tobytes()).hexdigest()[:16]


def main() -> None:
    from app.application import make_application
    from app.main_window import MainWindow

    app = make_application()
    mode = sys.argv[1]
    interval = float(sys.argv[3]) if mode == "work" else 30.0
    window = MainWindow(autosave_s=interval)
    window.show()
    if mode == "work":
        window.open_path(sys.argv[2])
        wait(app, lambda: window.controller.session is not None)
        session = window.controller.session
        c = window.controller
        c.submit("Add label", lambda s: s.add_label("disk"))
        edits = min(session.slices, 12)
        for k in range(edits):
            c.submit("Extend", lambda s, k=k: s.extend([[40 + 2 * k, 50 + 3 * k]], 6.0 + k % 3, label=1, slice=k))
            c.submit("Commit outline", lambda s: s.commit())
            wait(app, lambda: c.idle)
            mask = session.outlines(k, 1)[0].mask
            print(json.dumps({"slice": k, "time": time.time(), "mask": digest(mask)}), flush=True)
            stop = time.monotonic() + 0.4
            wait(app, lambda: time.monotonic() >= stop)
        print(json.dumps({"killed": time.time(), "autosaved": window.autosaver.last_saved is not None}), flush=True)
        os.kill(os.getpid(), signal.SIGKILL)
    else:
        from app.autosave import orphaned

        found = orphaned(window.autosaver.folder)
        print(json.dumps({"found": len(found)}), flush=True)
        if found:
            window.files.recover(found[0].path)
            wait(app, lambda: window.controller.session is not None)
            session = window.controller.session
            outlines = {str(o.slice): digest(o.mask) for o in session.outlines()}
            print(json.dumps({"outlines": outlines, "labels": [lab.name for lab in session.labels],
                              "left": [p.name for p in window.autosaver.folder.glob("session-*.tide")
                                       if p != window.autosaver.path]}), flush=True)
        window._closing = True
        window.close()


if __name__ == "__main__":
    main()
