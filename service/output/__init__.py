"""What people read: fixed-width text tables, fan charts and PNG plots (matplotlib), and
the backtest's HTML report. Pure functions of the JSON-ready answers; no HTTP, no
database."""
