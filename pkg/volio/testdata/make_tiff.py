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

# Multi-page seeds for FuzzTIFF: the same images as pages (page k adds k),
# plain, Deflate with predictor, LZW, and one whose third page is narrower.
def stack(a):
    return np.stack([a + k for k in range(3)]).astype(a.dtype)

tifffile.imwrite("tifffile_u8_pages.tif", stack(u8), photometric="minisblack")
tifffile.imwrite("tifffile_u16_pages_zlib_pred.tif", stack(u16), photometric="minisblack", compression="zlib", predictor=True)
pil = [Image.fromarray(p) for p in stack(u8)]
pil[0].save("pil_u8_pages_lzw.tif", save_all=True, append_images=pil[1:], compression="tiff_lzw")
with tifffile.TiffWriter("tifffile_pages_narrow.tif") as w:
    for p in (u8, u8, u8[:, :4]):
        w.write(p, photometric="minisblack", contiguous=False)
# BigTIFF seeds for FuzzTIFF: three uint8 pages; big-endian Deflate uint16.
b = (np.arange(3 * 6 * 5) % 251).astype("u1").reshape(3, 6, 5)
tifffile.imwrite("tifffile_u1_bigtiff_pages.tif", b, photometric="minisblack", bigtiff=True)
tifffile.imwrite("tifffile_u2_be_bigtiff_zlib.tif", b.astype("u2") * 200, photometric="minisblack", bigtiff=True, byteorder=">", compression="zlib")
