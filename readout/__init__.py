"""armlock readout: after the test, incremental revenue, iROAS and ROI with honest intervals, gated by the audit."""
