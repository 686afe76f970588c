"""Write tests/data/session_v1.h5, the committed session of format version 1.

Run once with the code that writes format version 1 (``python tests/data/make_session_v1.py``);
the file is then kept as it is so later versions prove they still read it (tests/test_session.py).
A new format version gets its own script and file; this one is not rerun.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np
import tifffile

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE.parent.parent), str(HERE.parent)]

from data.session_helpers import fake_result

from core.store import FORMAT_VERSION, Session

#: What the committed file holds (the test checks these values).
EXPECTED = {
    "name": "format one",
    "shots": ["R1", "R2"],
    "R1": {"upper_proposed_deg": 6.5, "lower_proposed_deg": -2.5, "final_upper_deg": 9.0,
           "status": "adjusted", "edits": 2, "shape": (4, 5)},
    "R2": {"failure": "no ball found in frame A"},
}


def main(out: Path = HERE / "session_v1.h5") -> None:
    assert FORMAT_VERSION == 1, "this script writes format version 1 only"
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        rng = np.random.default_rng(1)
        for shot in EXPECTED["shots"]:
            for ab in "ab":
                tifffile.imwrite(tmp / f"{shot}_{ab}.tif",
                                 rng.integers(0, 4000, (48, 64)).astype(np.uint16))
        path = tmp / "session.h5"
        with Session.create(path, name=EXPECTED["name"]) as s:
            for shot in EXPECTED["shots"]:
                s.add_shot(shot, tmp / f"{shot}_a.tif", tmp / f"{shot}_b.tif",
                           {"dt_s": 2e-5, "scale_mm_per_px": 0.08, "ball_diameter_mm": 71.6,
                            "seam_deg": 15.0, "notes": "fixture"}, embed=True)
            r1 = EXPECTED["R1"]
            s.save_result("R1", fake_result(s.settings_for("R1"), r1["upper_proposed_deg"],
                                            r1["lower_proposed_deg"], shape=r1["shape"]))
            s.set_pick("R1", status="accepted", who="fixture")
            s.set_pick("R1", status="adjusted", upper_deg=r1["final_upper_deg"], who="fixture",
                       note="shear layer leaves later")
            s.save_failure("R2", EXPECTED["R2"]["failure"])
        shutil.copyfile(path, out)
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
