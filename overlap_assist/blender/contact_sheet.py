"""Workbench renders of chosen frames composed into one labelled PNG (numpy + zlib, no imaging library).

Rendering uses the scene's camera and Workbench settings (headless with software GL on 4.5,
5.2 and 5.3). Each frame is written to a temporary PNG, read back through ``bpy.data.images``
and removed again. Labels are drawn with a 5×7 bitmap font of our own.
"""
import os
import struct
import tempfile
import zlib

import bpy
import numpy as np

# 5×7 glyphs, one string per row, '#' = ink. Lower case is drawn as upper case.
FONT = {
    "A": (".###.", "#...#", "#...#", "#####", "#...#", "#...#", "#...#"),
    "B": ("####.", "#...#", "#...#", "####.", "#...#", "#...#", "####."),
    "C": (".###.", "#...#", "#....", "#....", "#....", "#...#", ".###."),
    "D": ("####.", "#...#", "#...#", "#...#", "#...#", "#...#", "####."),
    "E": ("#####", "#....", "#....", "####.", "#....", "#....", "#####"),
    "F": ("#####", "#....", "#....", "####.", "#....", "#....", "#...."),
    "G": (".###.", "#...#", "#....", "#.###", "#...#", "#...#", ".####"),
    "H": ("#...#", "#...#", "#...#", "#####", "#...#", "#...#", "#...#"),
    "I": (".###.", "..#..", "..#..", "..#..", "..#..", "..#..", ".###."),
    "J": ("..###", "...#.", "...#.", "...#.", "...#.", "#..#.", ".##.."),
    "K": ("#...#", "#..#.", "#.#..", "##...", "#.#..", "#..#.", "#...#"),
    "L": ("#....", "#....", "#....", "#....", "#....", "#....", "#####"),
    "M": ("#...#", "##.##", "#.#.#", "#.#.#", "#...#", "#...#", "#...#"),
    "N": ("#...#", "#...#", "##..#", "#.#.#", "#..##", "#...#", "#...#"),
    "O": (".###.", "#...#", "#...#", "#...#", "#...#", "#...#", ".###."),
    "P": ("####.", "#...#", "#...#", "####.", "#....", "#....", "#...."),
    "Q": (".###.", "#...#", "#...#", "#...#", "#.#.#", "#..#.", ".##.#"),
    "R": ("####.", "#...#", "#...#", "####.", "#.#..", "#..#.", "#...#"),
    "S": (".####", "#....", "#....", ".###.", "....#", "....#", "####."),
    "T": ("#####", "..#..", "..#..", "..#..", "..#..", "..#..", "..#.."),
    "U": ("#...#", "#...#", "#...#", "#...#", "#...#", "#...#", ".###."),
    "V": ("#...#", "#...#", "#...#", "#...#", "#...#", ".#.#.", "..#.."),
    "W": ("#...#", "#...#", "#...#", "#.#.#", "#.#.#", "#.#.#", ".#.#."),
    "X": ("#...#", "#...#", ".#.#.", "..#..", ".#.#.", "#...#", "#...#"),
    "Y": ("#...#", "#...#", ".#.#.", "..#..", "..#..", "..#..", "..#.."),
    "Z": ("#####", "....#", "...#.", "..#..", ".#...", "#....", "#####"),
    "0": (".###.", "#...#", "#..##", "#.#.#", "##..#", "#...#", ".###."),
    "1": ("..#..", ".##..", "..#..", "..#..", "..#..", "..#..", ".###."),
    "2": (".###.", "#...#", "....#", "...#.", "..#..", ".#...", "#####"),
    "3": ("####.", "....#", "....#", ".###.", "....#", "....#", "####."),
    "4": ("...#.", "..##.", ".#.#.", "#..#.", "#####", "...#.", "...#."),
    "5": ("#####", "#....", "####.", "....#", "....#", "#...#", ".###."),
    "6": (".###.", "#....", "#....", "####.", "#...#", "#...#", ".###."),
    "7": ("#####", "....#", "...#.", "..#..", ".#...", ".#...", ".#..."),
    "8": (".###.", "#...#", "#...#", ".###.", "#...#", "#...#", ".###."),
    "9": (".###.", "#...#", "#...#", ".####", "....#", "....#", ".###."),
    " ": (".....",) * 7,
    ".": (".....", ".....", ".....", ".....", ".....", ".##..", ".##.."),
    ",": (".....", ".....", ".....", ".....", ".##..", "..#..", ".#..."),
    ":": (".....", ".##..", ".##..", ".....", ".##..", ".##..", "....."),
    "-": (".....", ".....", ".....", "#####", ".....", ".....", "....."),
    "+": (".....", "..#..", "..#..", "#####", "..#..", "..#..", "....."),
    "/": ("....#", "....#", "...#.", "..#..", ".#...", "#....", "#...."),
    "(": ("...#.", "..#..", ".#...", ".#...", ".#...", "..#..", "...#."),
    ")": (".#...", "..#..", "...#.", "...#.", "...#.", "..#..", ".#..."),
    "%": ("##..#", "##..#", "...#.", "..#..", ".#...", "#..##", "#..##"),
    "=": (".....", ".....", "#####", ".....", "#####", ".....", "....."),
    "?": (".###.", "#...#", "....#", "...#.", "..#..", ".....", "..#.."),
}
GLYPH_W, GLYPH_H, GLYPH_GAP = 5, 7, 1

PAPER = (246, 244, 238)
INK = (29, 33, 37)
WARN = (156, 63, 22)


def text_width(text, scale):
    return len(text) * (GLYPH_W + GLYPH_GAP) * scale


def draw_text(img, x, y, text, scale=1, color=INK):
    """Draw ``text`` into ``img`` (h, w, 3 uint8) with its top-left at (x, y); clipped at the edges."""
    h, w, _ = img.shape
    for ch in str(text).upper():
        rows = FONT.get(ch, FONT["?"])
        mask = np.array([[c == "#" for c in r] for r in rows], dtype=bool)
        mask = np.kron(mask, np.ones((scale, scale), dtype=bool))
        y0, x0 = y, x
        y1, x1 = min(y0 + mask.shape[0], h), min(x0 + mask.shape[1], w)
        if y0 < h and x0 < w and y1 > y0 and x1 > x0:
            img[y0:y1, x0:x1][mask[:y1 - y0, :x1 - x0]] = color
        x += (GLYPH_W + GLYPH_GAP) * scale


class SheetLayout:
    """Where the title bands, labels and tiles of a contact sheet go (all sizes in pixels)."""

    def __init__(self, n_rows, n_cols, tile_w, tile_h, scale=1):
        self.n_rows, self.n_cols, self.tile_w, self.tile_h, self.s = n_rows, n_cols, tile_w, tile_h, scale
        self.gap = 4 * scale
        self.title_h = (GLYPH_H + 6) * scale
        self.label_h = (GLYPH_H + 4) * scale
        self.footer_h = (GLYPH_H + 6) * scale
        self.row_h = self.title_h + self.label_h + tile_h + self.gap

    @property
    def size(self):
        """(width, height) of the whole sheet."""
        return (self.gap + self.n_cols * (self.tile_w + self.gap),
                self.gap + self.n_rows * self.row_h + self.footer_h)

    def tile_origin(self, row, col):
        return (self.gap + col * (self.tile_w + self.gap),
                self.gap + row * self.row_h + self.title_h + self.label_h)


def compose_sheet(rows, tile_w, tile_h, scale=1, footer=""):
    """One image from rows of tiles.

    Parameters
    ----------
    rows : list of (title, [(label, tile ndarray (tile_h, tile_w, 3) uint8), ...])
    footer : str, a line along the bottom

    Returns
    -------
    ndarray, shape (height, width, 3), uint8
    """
    n_cols = max(len(tiles) for _, tiles in rows)
    lay = SheetLayout(len(rows), n_cols, tile_w, tile_h, scale)
    w, h = lay.size
    img = np.empty((h, w, 3), dtype=np.uint8)
    img[:] = PAPER
    for r, (title, tiles) in enumerate(rows):
        y_title = lay.gap + r * lay.row_h + 2 * scale
        draw_text(img, lay.gap, y_title, title, scale, INK)
        for c, (label, tile) in enumerate(tiles):
            x, y = lay.tile_origin(r, c)
            draw_text(img, x, y - lay.label_h + scale, label, scale, WARN)
            img[y:y + tile_h, x:x + tile_w] = tile
    if footer:
        draw_text(img, lay.gap, h - lay.footer_h + 3 * scale, footer, scale, INK)
    return img


def write_png(path, rgb):
    """Write an (h, w, 3) uint8 array as an 8-bit RGB PNG, atomically."""
    rgb = np.ascontiguousarray(rgb, dtype=np.uint8)
    h, w, _ = rgb.shape
    raw = np.zeros((h, 1 + 3 * w), dtype=np.uint8)   # filter byte 0 (None) per row
    raw[:, 1:] = rgb.reshape(h, 3 * w)

    def chunk(tag, data):
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data) & 0xFFFFFFFF)

    png = (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0))
           + chunk(b"IDAT", zlib.compress(raw.tobytes(), 6)) + chunk(b"IEND", b""))
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "wb") as f:
        f.write(png)
    os.replace(tmp, path)


def render_frames(scene, frames):
    """Render ``frames`` of ``scene`` with its camera; returns a list of (h, w, 3) uint8 images.

    The current frame is restored afterwards; temporary files are removed.
    """
    saved = scene.frame_current
    window = bpy.context.window
    saved_scene = window.scene if window else None
    w = scene.render.resolution_x * scene.render.resolution_percentage // 100
    h = scene.render.resolution_y * scene.render.resolution_percentage // 100
    out = []
    with tempfile.TemporaryDirectory(prefix="overlap_render_") as tmp:
        try:
            if window:
                window.scene = scene
                bpy.context.view_layer.update()  # 4.5 (no event loop) evaluates a switched-to scene only then
            for k, f in enumerate(frames):
                scene.frame_set(int(f))
                path = os.path.join(tmp, f"frame_{k:02d}.png")
                scene.render.filepath = path
                bpy.ops.render.render(write_still=True, scene=scene.name)
                img = bpy.data.images.load(path, check_existing=False)
                try:
                    px = np.empty(img.size[0] * img.size[1] * 4, dtype=np.float32)
                    img.pixels.foreach_get(px)
                    rgba = px.reshape(img.size[1], img.size[0], 4)[::-1]   # Blender rows run bottom-up
                finally:
                    bpy.data.images.remove(img)
                tile = np.clip(np.round(rgba[:, :, :3] * 255), 0, 255).astype(np.uint8)
                if tile.shape[:2] != (h, w):
                    raise RuntimeError(f"render came back {tile.shape[1]}×{tile.shape[0]}, expected {w}×{h}")
                out.append(tile)
        finally:
            scene.render.filepath = ""
            scene.frame_set(saved)
            if window and saved_scene is not None:
                window.scene = saved_scene
    return out
