"""Reading study lists: file guards, CSV, sheets (xlsx/ods), the grid, parquet."""
