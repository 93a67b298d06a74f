"""Configuration: schemas, specs and their catalogue, checks, lanes, the plan, composition."""
