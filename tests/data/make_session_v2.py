"""Write tests/data/session_v2.h5, the committed session of format version 2.

Version 2 adds the grouping columns and other analysts' review layers to the index
(``core.store.reviews``). Run once with the code that writes format version 2
(``python tests/data/make_session_v2.py``); the file is then kept as it is so later versions
prove they still read it (tests/test_review_content.py). This script is not rerun.
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
from core.store.reviews import LayerPick, ReviewLayer

#: What the committed file holds (the test checks these values).
EXPECTED = {
    "name": "format two",
    "shots": ["T1", "T2", "T3"],
    "seam_deg": [10.0, 10.0, 20.0],
    "conditions_by": ["seam_deg"],
    "layer": "second analyst",
    "T1": {"status": "adjusted", "upper_deg": 6.0, "lower_deg": -2.5},
    "theirs T1": {"status": "adjusted", "upper_deg": 7.5, "lower_deg": -2.0},
    "theirs T3": {"status": "unusable", "reason": "ball out of the sheet"},
}


def main(out: Path = HERE / "session_v2.h5") -> None:
    assert FORMAT_VERSION == 2, "this script writes format version 2 only"
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        rng = np.random.default_rng(2)
        for shot in EXPECTED["shots"]:
            for ab in "ab":
                tifffile.imwrite(tmp / f"{shot}_{ab}.tif",
                                 rng.integers(0, 4000, (48, 64)).astype(np.uint16))
        path = tmp / "session.h5"
        with Session.create(path, name=EXPECTED["name"]) as s:
            for shot, seam in zip(EXPECTED["shots"], EXPECTED["seam_deg"], strict=True):
                s.add_shot(shot, tmp / f"{shot}_a.tif", tmp / f"{shot}_b.tif",
                           {"dt_s": 2e-5, "scale_mm_per_px": 0.08, "ball_diameter_mm": 71.6,
                            "seam_deg": seam}, embed=True)
                s.save_result(shot, fake_result(s.settings_for(shot), 6.5, -2.5, shape=(4, 5)))
            mine = EXPECTED["T1"]
            s.set_pick("T1", status=mine["status"], upper_deg=mine["upper_deg"],
                       lower_deg=mine["lower_deg"], who="fixture")
            s.set_conditions_by(EXPECTED["conditions_by"])
            theirs = {"T1": LayerPick(**EXPECTED["theirs T1"], who="second analyst"),
                      "T3": LayerPick(**EXPECTED["theirs T3"], who="second analyst")}
            s.add_review_layer(ReviewLayer(EXPECTED["layer"], "theirs.csv",
                                           "2025-01-01T00:00:00Z", theirs))
        shutil.copyfile(path, out)
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
