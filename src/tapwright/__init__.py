"""tapwright: from a filter requirement to a sized, bit-exact, verified hardware block."""

__version__ = "0.1.0"

CAUTION = ("Estimates are for sizing before layout, not sign-off: timing and resource closure "
           "belong to the vendor's implementation tools.")
