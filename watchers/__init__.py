"""The live shell around the kinetics library: folder events, the ledger loop, live views."""
