"""What the runs mean: risk and other metrics (:mod:`.metrics`), a run's summary
(:mod:`.summary`) and the paired comparison of plans (:mod:`.compare`)."""
