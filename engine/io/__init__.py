"""Reading files: CSV and other text, Excel, Parquet, SPSS/Stata/SAS; memory limits."""
