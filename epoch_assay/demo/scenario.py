"""The demo study, READ-01: sentence endings in Thessari, read at the Marrowgate Language Lab.

Everything here is invented for the demo: the lab, the language and the people.

The Marrowgate Language Lab studies how readers of Thessari, a small constructed
language with verb-final word order, build up expectations while a sentence unfolds.
In READ-01 each participant reads sentences one word at a time. The last word either
fits the context, as in "the ferryman rowed across the *river*" (Thessari: "kel
varuno tesh amrin *olvasa*"), or does not, as in "the ferryman rowed across the
*lantern*" ("kel varuno tesh amrin *fenduri*"). Trials are labelled ``"congruent"``
and ``"incongruent"`` after the final word.

Both endings evoke a negativity over centro-parietal sites between 300 and 500 ms
after the final word; the incongruent endings evoke a larger one. The scoring window
of the demo is therefore ``EFFECT_WINDOW_S`` and the contrast is incongruent minus
congruent.
"""

STUDY_CODE = "READ-01"
STUDY_TITLE = "Thessari sentence endings: congruent versus incongruent final words"
SESSION = "ses-01"
N_SUBJECTS = 6

CONGRUENT = "congruent"
INCONGRUENT = "incongruent"
CONDITIONS = (CONGRUENT, INCONGRUENT)

EFFECT_WINDOW_S = (0.3, 0.5)


def subject_id(subject_index: int) -> str:
    """The subject label of the ``subject_index``-th participant (1-based): ``sub-01``."""
    return f"sub-{subject_index:02d}"
