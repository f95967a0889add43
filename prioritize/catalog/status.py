"""Per-row status codes: every input row ends in the output with one of these.

``ok`` means the whole chain ran; every other code says why a row was not (fully)
computed, and the row's ``note`` says what to fix.  Codes are stable strings:
later tools and tests rely on them.
"""

from __future__ import annotations

OK = "ok"
DUPLICATE_ID = "duplicate_id"            # the same star_id appears more than once (later copies)
INVALID_VALUE = "invalid_value"          # non-numeric text or an impossible value in a column
MISSING_INPUTS = "missing_inputs"        # not enough columns to place the star on tracks
OUT_OF_MODEL_RANGE = "out_of_model_range"  # mass / metallicity / position the track grid cannot explain
NOT_ANOMALOUS_ROTATOR = "not_anomalous_rotator"  # left out by the rapid-rotator filter
COMPUTATION_FAILED = "computation_failed"  # the chain failed on this row; the note has the message

ALL = (OK, DUPLICATE_ID, INVALID_VALUE, MISSING_INPUTS, OUT_OF_MODEL_RANGE, NOT_ANOMALOUS_ROTATOR,
       COMPUTATION_FAILED)

DESCRIPTIONS = {
    OK: "computed",
    DUPLICATE_ID: "star_id repeats an earlier row; only the first copy is computed",
    INVALID_VALUE: "a value is non-numeric or physically impossible",
    MISSING_INPUTS: "not enough inputs to place the star on stellar tracks",
    OUT_OF_MODEL_RANGE: "outside the range of the stellar track grid",
    NOT_ANOMALOUS_ROTATOR: "computed, but left out by --rapid-only: rotation not anomalous or unknown",
    COMPUTATION_FAILED: "the computation failed for this row (a fault of the tool; the note has "
                        "the message: please report it); the other rows are unaffected",
}

# The trade's evolutionary stages, in order along a track.
STAGES = ("main_sequence", "turnoff", "subgiant", "lower_giant_branch",
          "upper_giant_branch", "red_clump")
STAGE_ALIASES = {
    "ms": "main_sequence", "dwarf": "main_sequence", "main sequence": "main_sequence",
    "to": "turnoff", "msto": "turnoff", "turn-off": "turnoff",
    "sg": "subgiant", "sgb": "subgiant",
    "rgb": "lower_giant_branch", "lrgb": "lower_giant_branch", "lower_rgb": "lower_giant_branch",
    "giant": "lower_giant_branch", "red giant": "lower_giant_branch",
    "urgb": "upper_giant_branch", "upper_rgb": "upper_giant_branch", "rgb_above_bump": "upper_giant_branch",
    "rc": "red_clump", "clump": "red_clump", "chb": "red_clump", "hb": "red_clump",
}
