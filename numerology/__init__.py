"""numerology: choose and justify OFDM numerologies from channel bounds and goals."""

__version__ = "0.1.0"
