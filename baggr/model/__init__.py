"""The kept ensemble: packed trees (forest, arena), the Ensemble, the model file (file, npzfile)
and scoring (scoring, predict_kernels)."""
