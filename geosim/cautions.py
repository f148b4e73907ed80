"""The one caution text that travels with every geosim output."""

CAUTION = (
    "CAUTION: geosim realizations and summaries are statistical models built from "
    "sparse samples. They describe uncertainty under the assumptions of the chosen "
    "model and must not be used alone for safety-critical ground decisions "
    "(excavation or slope stability, foundations, water supply or contamination "
    "decisions, public resource statements). Defer to local codes, reporting "
    "standards and licensed or qualified professionals."
)
