"""Readers and writers of file formats shared by the stages: tabular files
(CSV, TSV, XLSX) here; tree formats beside them."""
