"""Reference vibrational data shared by the engine tests."""

# NIST CCCBDB, experimental vibrational fundamentals (gas phase), cm^-1, degeneracies written out.
# Values from memory (not re-checked against the database in this session).
EXPERIMENTAL_FUNDAMENTALS_CM1 = {
    "water": ("O", [1595, 3657, 3756]),
    "carbon dioxide": ("O=C=O", [667, 667, 1333, 2349]),
    "methane": ("C", [1306] * 3 + [1534] * 2 + [2917] + [3019] * 3),
    "formaldehyde": ("C=O", [1167, 1249, 1500, 1746, 2782, 2843]),
    "ethylene": ("C=C", [826, 943, 949, 1023, 1236, 1342, 1444, 1623, 2989, 3026, 3103, 3106]),
}
