"""The caution every output someone builds from carries (docs/domain.md, "Safety")."""

SAFETY_CAUTION = ("Caution: these figures are geometric and quasi-static estimates. Prototypes must be tested; "
                  "structural sign-off, brakes, tilt locks and road use follow local rules and qualified engineers.")
