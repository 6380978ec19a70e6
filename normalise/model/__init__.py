"""What every pass shares: the plan and the values it holds.

``plan`` (the plan's dataclasses, the column types and the bookkeeping tables, declared once), ``schema`` (the
tables a plan makes), ``views`` (the summary views and their SQL), ``describe`` (what each table, view and column
means, in words), ``names`` (SQL names made from the input's), ``errors`` (the error family with its places and
exit codes), ``escapes`` (text no UTF-8 output can hold, written as escapes), ``exact`` (values given back
exactly, and their digests), ``decimals`` and ``datetimes`` (the exact forms of decimal, date and timestamp text).
Nothing here imports a pass.
"""

__all__ = ["datetimes", "decimals", "describe", "errors", "escapes", "exact", "names", "plan", "schema", "views"]
