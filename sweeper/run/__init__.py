"""One plan end to end: the plan translated into a run's values (spec), the pre-flight check,
the supervised sweep under the fault policies, recovery and resume, the transcript, and the one
crash-safety path that switches the source off and finishes the records (session)."""
