# Oracle for tests/condition: 2nd-order Butterworth high-pass from scipy.signal.butter
# (python3-scipy, Debian; bilinear transform with prewarping) applied with
# scipy.signal.lfilter with the lfilter_zi * x[0] initial state.
# Usage: oracle_butter_hp.py IN.f32 OUT.f32 CORNER   (CORNER in cycles per sample)
import sys
import numpy as np
from scipy import signal

src, dst, corner = sys.argv[1], sys.argv[2], float(sys.argv[3])
x = np.fromfile(src, dtype='<f4').astype(np.float64)
b, a = signal.butter(2, corner * 2.0, btype='highpass')
zi = signal.lfilter_zi(b, a) * x[0]
y, _ = signal.lfilter(b, a, x, zi=zi)
y.astype('<f4').tofile(dst)
print(' '.join(repr(v) for v in list(b) + list(a)))
