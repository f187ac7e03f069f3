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

What the lab's recordings are like, and so what the demo's pipelines are up against:

- the old amplifier in booth B lets the electrode potentials drift slowly (tens of µV
  over minutes), so without a high-pass each trial sits on its own offset;
- in every second session a gel smear made one electrode noisy (``NOISY_CHANNEL``) and
  one came loose and wanders (``LOOSE_CHANNEL``); an average reference spreads both over
  every channel unless they are found and interpolated first;
- readers blink, mostly between words but sometimes during one;
- once a high-pass has taken the offsets away, a baseline over the 200 ms before the
  final word only subtracts that interval's background activity from every trial: it
  adds noise instead of removing it.
"""

STUDY_CODE = "READ-01"
STUDY_TITLE = "Thessari sentence endings: congruent versus incongruent final words"
SESSION = "ses-01"
N_SUBJECTS = 8

# Amplitudes of the simulated lab, in µV (see the module docstring).
DRIFT_UV = 25.0
BACKGROUND_UV = 6.0
EFFECT_UV = 8.0
TRIALS_PER_CONDITION = 40
NOISY_CHANNEL, NOISY_CHANNEL_UV = "Cz", 80.0
LOOSE_CHANNEL, LOOSE_CHANNEL_UV = "O1", 40.0

CONGRUENT = "congruent"
INCONGRUENT = "incongruent"
CONDITIONS = (CONGRUENT, INCONGRUENT)

EFFECT_WINDOW_S = (0.3, 0.5)


def has_faulty_electrodes(subject_index: int) -> bool:
    """Every second session (subjects 2, 4, …) has the noisy and the loose electrode."""
    return subject_index % 2 == 0


def subject_id(subject_index: int) -> str:
    """The subject label of the ``subject_index``-th participant (1-based): ``sub-01``."""
    return f"sub-{subject_index:02d}"
