"""Cautions shown in help texts and reports (general safety practice of the trade)."""

CONTACT_LIQUID = (
    "Contact liquids (typically diiodomethane with dissolved sulphur and iodine compounds) are "
    "toxic and irritant: avoid skin contact and vapour, use a tiny drop, ventilate, keep the "
    "bottle closed and dark, and dispose of waste as hazardous under your local rules."
)
PRISM = (
    "The prism is softer than many stones: slide stones on gently, never drop them, never use "
    "metal tweezers on the prism, and clean it with a soft cloth."
)
EVIDENCE = (
    "A reading is evidence, not a verdict: refractive index alone rarely proves an identity. "
    "Follow laboratory practice and local trade rules; a report for sale or insurance needs the "
    "signature of a qualified gemmologist."
)
ALL = (CONTACT_LIQUID, PRISM, EVIDENCE)
HELP_EPILOG = "Cautions: " + " ".join(ALL)
