"""Running a scenario: the model in cell units (:mod:`.model`), the yearly cycle (:mod:`.cycle`),
batches of replicates and their checkpoints (:mod:`.batches`), the memory and disk a run needs
(:mod:`.resources`), the combined results (:mod:`.results`), Dask execution
(:mod:`.distributed`), a whole run (:mod:`.run`) and the text of ``gridpop check``
(:mod:`.check`)."""
