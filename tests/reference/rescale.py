"""Resamples a grey crop of scikit-image's coffee photograph by a factor omega with
scipy.ndimage.map_coordinates (bilinear, order=1): output sample i takes the input at i / omega,
so sample 0 is an original one, the resampling model of Popescu & Farid (2005) and Kirchner (2008).

Usage: rescale.py FACTOR OUT.f32 -> prints "height width"; writes float32 samples 0..255.
"""
import sys

import numpy as np
import skimage.data as data
from scipy.ndimage import map_coordinates
from skimage.color import rgb2gray

omega = float(sys.argv[1])
grey = rgb2gray(data.coffee())[60:316, 100:356] * 255.0  # 256 x 256 crop
m = int(256 * omega)
yy, xx = np.mgrid[0:m, 0:m] / omega
out = map_coordinates(grey, [yy, xx], order=1, mode="nearest")
out.astype("<f4").tofile(sys.argv[2])
print(out.shape[0], out.shape[1])
