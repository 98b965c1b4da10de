"""Fixed vocabularies shared by the models, the schemas and the command line (no heavy imports)."""

RUN_KINDS = ("thermomagnetic", "hysteresis", "backfield", "susceptibility",
             "resonance", "diffraction", "calorimetry")
RUN_STATUSES = ("planned", "running", "recorded", "superseded", "retracted")
BRANCHES = ("heating", "cooling")
ROLES = ("viewer", "recorder", "curator")
SPECIMEN_KINDS = ("single crystal", "aggregate", "powder", "polished section")
SHAPES = ("delimited", "sectioned", "commented", "blocks", "spreadsheet")
INSTRUMENT_KINDS = ("magnetometer", "ultrasound", "diffractometer", "calorimeter", "other")
