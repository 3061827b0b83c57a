"""Prefect flows of qcpipe (installed as ``qcpipe.flows``); they only wire pipeline functions."""
