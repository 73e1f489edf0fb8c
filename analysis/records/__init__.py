"""Records of inspections: the log, tolerances, presets and certificates.

:mod:`.log` is the inspection log's one interface (what a record holds, where a log is,
writing and reading records); :mod:`.sqlite_store` keeps a log in one SQLite file, the
embedded default for a single station, and :mod:`.postgres_store` in a PostgreSQL
database that a shop's stations and its QA office share (callers use :mod:`.log`, never
a store directly). :mod:`.tolerances` reads ISO 10110-5 and plain limits and judges a
record against them; :mod:`.presets` holds the benches' settings in TOML;
:mod:`.certificate` builds one certificate document from a record and renders it as
HTML, and :mod:`.certificate_pdf` renders the same document as a PDF page.
"""
