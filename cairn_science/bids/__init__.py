"""Reading and checking BIDS-organised EEG datasets (no Django here).

``validate.validate_dataset`` is the entry point; ``names`` checks file names against the
BIDS schema, ``sidecars`` applies the inheritance principle, ``readers`` and ``tables`` read
and check TSV/JSON files, ``headers`` reads data-file headers, ``ratings`` finds workload
ratings and blocks, ``deid`` finds and scrubs identifiers, ``index`` compares with pybids.
"""
