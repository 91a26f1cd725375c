"""The caution printed with every velocity product: it is a first pass, for qualified review."""

CAUTION = ("velspec gives a first-pass velocity field: qualified people must review it before it is used "
           "for depth conversion or well planning; local regulations and licensed practice prevail.")
