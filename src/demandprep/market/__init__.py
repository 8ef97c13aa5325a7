"""Market build: receipt lines to the aggregate share table (see demandprep.market.stages)."""
