"""Reads a PNG written by Rete with OpenCV (an independent decoder) and compares it with the
float array Rete saved as .npy: 8-bit quantisation means at most half a level (0.5/255)."""
import sys
try:
    import numpy as np
    import cv2
except ImportError as e:
    print(f"SKIP: reference library missing: {e}")
    sys.exit(77)
png, npy = sys.argv[1], sys.argv[2]
img = cv2.imread(png, cv2.IMREAD_UNCHANGED)
ref = np.load(npy)            # (C, H, W) planar
if img.ndim == 3:
    img = img[:, :, ::-1].transpose(2, 0, 1)   # BGR -> RGB, planar
got = img.astype(np.float64) / 255.0
diff = np.abs(got - ref).max()
print(f"largest difference {diff:.3g} (tolerance {0.5/255:.3g})")
if diff > 0.5 / 255 + 1e-6:
    print("MISMATCH"); sys.exit(1)
print("OK")
