//! Predicted inter-carrier interference from Doppler and residual CFO (in progress).
