"""Follow-up over years: visits, per-patient change and slopes, cohort tables."""
