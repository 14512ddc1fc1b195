"""wakeledger: the shot ledger and self-modulation model check of a campaign."""

__version__ = "0.1.0"
