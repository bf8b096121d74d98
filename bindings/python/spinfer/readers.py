"""Optional readers for two common HDF5 formats; they need h5py (``pip install 'spinfer[readers]'``).

- NWB 2.x files (neurophysiology): :func:`read_nwb_units` reads the spike times and observation
  intervals of the ``/units`` table; :func:`bin_nwb_units` bins them with the same core rules as
  :func:`spinfer.bin_spikes`, turning the times a unit was not observed into dropped gap bins.
- AnnData ``.h5ad`` files (single-cell expression): :func:`read_h5ad_binary` reads a dense or
  sparse (CSR/CSC) expression matrix with its gene and cell names and thresholds it per gene into
  an on/off matrix (default: active = value > 0, i.e. detected).

Neither pynwb nor anndata is needed. h5py is imported on first use, so ``import spinfer`` works
without it; calling a reader without h5py raises ``ImportError`` saying how to install it.
Missing or unreadable files raise ``OSError``; bad content raises ``ValueError`` naming the file
and the dataset.
"""
from ._h5ad import BinarizedExpression, read_h5ad_binary
from ._nwb import NwbUnits, bin_nwb_units, read_nwb_units

__all__ = ["read_nwb_units", "bin_nwb_units", "NwbUnits", "read_h5ad_binary", "BinarizedExpression"]
