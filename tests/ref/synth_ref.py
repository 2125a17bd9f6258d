"""References for the synthetic-photograph generator (tests/test_synth_reference.c).

jpeg IN.npy QUALITY OUT_SCIPY.npy OUT_PIL.npy
    IN is a (3, H, W) float32 photograph with 8-bit values in [0,1].
    OUT_SCIPY: the same JPEG-like quantisation rebuilt with scipy.fft.dctn (orthonormal
    DCT-II) and the tables of ITU-T T.81 Annex K (K.1, K.2) scaled as the IJG library does.
    OUT_PIL: a real JPEG at that quality, 4:4:4 (no chroma subsampling), by Pillow (libjpeg),
    decoded again.
widths VESSELS.npy WIDTHS.npy
    Compares the generator's width map with the vessel mask's own geometry: at the medial axis
    (skimage.morphology.medial_axis), twice the distance to the background against the width.
    Prints JSON.
"""
import io
import json
import sys

import numpy as np

LUMINANCE = np.array([
    16, 11, 10, 16, 24, 40, 51, 61,
    12, 12, 14, 19, 26, 58, 60, 55,
    14, 13, 16, 24, 40, 57, 69, 56,
    14, 17, 22, 29, 51, 87, 80, 62,
    18, 22, 37, 56, 68, 109, 103, 77,
    24, 35, 55, 64, 81, 104, 113, 92,
    49, 64, 78, 87, 103, 121, 120, 101,
    72, 92, 95, 98, 112, 100, 103, 99], dtype=np.float64).reshape(8, 8)
CHROMINANCE = np.full((8, 8), 99.0)
CHROMINANCE[:4, :4] = np.array([
    17, 18, 24, 47,
    18, 21, 26, 66,
    24, 26, 56, 99,
    47, 66, 99, 99]).reshape(4, 4)


def steps(table, quality):
    scale = 5000.0 / quality if quality < 50 else 200.0 - 2.0 * quality
    return np.clip(np.floor((table * scale + 50.0) / 100.0), 1, 255)


def jpeg_scipy(rgb, quality):
    from scipy.fft import dctn, idctn
    r, g, b = (255.0 * rgb.astype(np.float64))
    planes = [0.299 * r + 0.587 * g + 0.114 * b,
              128.0 - 0.168736 * r - 0.331264 * g + 0.5 * b,
              128.0 + 0.5 * r - 0.418688 * g - 0.081312 * b]
    h, w = r.shape
    ph, pw = -(-h // 8) * 8, -(-w // 8) * 8
    out = []
    for c, plane in enumerate(planes):
        q = steps(LUMINANCE if c == 0 else CHROMINANCE, quality)
        padded = np.pad(plane - 128.0, ((0, ph - h), (0, pw - w)), mode='edge')
        blocks = padded.reshape(ph // 8, 8, pw // 8, 8).transpose(0, 2, 1, 3)
        coefficients = dctn(blocks, axes=(2, 3), norm='ortho')
        coefficients = q * np.round(coefficients / q)
        back = idctn(coefficients, axes=(2, 3), norm='ortho')
        out.append(back.transpose(0, 2, 1, 3).reshape(ph, pw)[:h, :w] + 128.0)
    y, cb, cr = out[0], out[1] - 128.0, out[2] - 128.0
    rgb_out = np.stack([y + 1.402 * cr, y - 0.344136 * cb - 0.714136 * cr, y + 1.772 * cb])
    return np.clip(rgb_out / 255.0, 0.0, 1.0).astype(np.float32)


def jpeg_pil(rgb, quality):
    from PIL import Image
    pixels = np.clip(np.round(rgb.transpose(1, 2, 0) * 255.0), 0, 255).astype(np.uint8)
    buffer = io.BytesIO()
    Image.fromarray(pixels, 'RGB').save(buffer, 'JPEG', quality=quality, subsampling=0)
    buffer.seek(0)
    decoded = np.asarray(Image.open(buffer).convert('RGB'), dtype=np.float32) / 255.0
    return decoded.transpose(2, 0, 1).copy()


def widths(vessels_path, widths_path):
    from skimage.morphology import medial_axis
    vessels = np.load(vessels_path) > 0.5
    width = np.load(widths_path)
    skeleton, distance = medial_axis(vessels, return_distance=True)
    # Away from crossings and ends a vessel of width w covers the pixel centres within w/2 of
    # its centreline, so the nearest background centre lies between w/2 and w/2 + 1 away.
    picked = skeleton & (width >= 3.0)
    measured = 2.0 * distance[picked]
    drawn = width[picked]
    difference = measured - drawn
    print(json.dumps({
        'n': int(picked.sum()),
        'median_difference': float(np.median(difference)),
        'within_2px': float(np.mean(np.abs(difference) <= 2.0)),
        'max_drawn': float(width.max()),
        'max_measured': float(2.0 * distance.max()),
    }))


def main():
    mode = sys.argv[1]
    if mode == 'jpeg':
        rgb = np.load(sys.argv[2])
        quality = int(sys.argv[3])
        np.save(sys.argv[4], jpeg_scipy(rgb, quality))
        np.save(sys.argv[5], jpeg_pil(rgb, quality))
    elif mode == 'widths':
        widths(sys.argv[2], sys.argv[3])
    else:
        raise SystemExit('unknown mode ' + mode)


if __name__ == '__main__':
    main()
