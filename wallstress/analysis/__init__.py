"""analyse(): the measures, classes and grades of every row, and the methods record."""
