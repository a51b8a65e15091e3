"""Study files and the study jobs: assess, tune, sweep, budget; results cache and executors."""
