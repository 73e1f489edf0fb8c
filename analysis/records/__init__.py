"""Records of inspections: the inspection log's interface (:mod:`.log`) and its two stores.

:mod:`.sqlite_store` keeps a log in one SQLite file, the embedded default for a single
station; :mod:`.postgres_store` keeps it in a PostgreSQL database that a shop's stations
and its QA office share. Callers use :mod:`.log` and never a store directly.
"""
