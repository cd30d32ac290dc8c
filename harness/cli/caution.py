"""The caution every command's help and every HTML report carries."""

CAUTION = (
    "CAUTION: a PFC bus (~400 V DC) is lethal. pfcrig output is reference material, to be "
    "validated on hardware by qualified people; local electrical codes and licensed practice "
    "take precedence."
)
