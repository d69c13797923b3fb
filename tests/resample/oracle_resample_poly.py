# Oracle for tests/resample: rational resampling with scipy.signal.resample_poly
# (python3-scipy, Debian), given an explicit Kaiser low-pass designed by scipy.signal.firwin.
# Usage: oracle_resample_poly.py IN.f32 OUT.f32 UP DOWN NUMTAPS BETA CUTOFF
#   CUTOFF in cycles per *input* sample; NUMTAPS odd, at the up-sampled rate.
import sys
import numpy as np
from scipy import signal

src, dst, up, down, numtaps, beta, cutoff = sys.argv[1:8]
up, down, numtaps = int(up), int(down), int(numtaps)
x = np.fromfile(src, dtype='<f4').astype(np.float64)
# firwin's cutoff is relative to the Nyquist of the rate the filter runs at (up x input);
# resample_poly multiplies the given filter by `up` itself (scipy 1.10 source).
h = signal.firwin(numtaps, float(cutoff) * 2.0 / up, window=("kaiser", float(beta)))
y = signal.resample_poly(x, up, down, window=h)
y.astype('<f4').tofile(dst)
