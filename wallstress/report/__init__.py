"""The self-contained offline HTML report."""
