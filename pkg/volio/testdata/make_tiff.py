# Writes the small reference TIFF slices in this directory with tifffile
# 2023.2.3 and PIL 9.4 (Debian bookworm). Values, with i = y*5 + x on a
# 6×5 image:  uint8 (37*i) % 256,  uint16 (2521*i) % 65536,  float32 0.37*i - 5.5.
# Run: /usr/bin/python3 make_tiff.py
import numpy as np, tifffile
from PIL import Image

i = np.arange(30).reshape(6, 5)
u8 = ((37 * i) % 256).astype(np.uint8)
u16 = ((2521 * i) % 65536).astype(np.uint16)
f4 = (0.37 * i - 5.5).astype(np.float32)

tifffile.imwrite("tifffile_u8.tif", u8)
tifffile.imwrite("tifffile_u16_be.tif", u16, byteorder=">")
tifffile.imwrite("tifffile_u16_zlib_pred.tif", u16, compression="zlib", predictor=True)
tifffile.imwrite("tifffile_f4.tif", f4, rowsperstrip=2)
tifffile.imwrite("tifffile_f4_be_zlib.tif", f4, byteorder=">", compression="zlib")
Image.fromarray(u8).save("pil_u8_lzw.tif", compression="tiff_lzw")
Image.fromarray(u16).save("pil_u16_packbits.tif", compression="packbits")
