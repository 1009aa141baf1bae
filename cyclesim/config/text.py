"""The bytes of a config file as text: UTF-8 (with or without a byte-order mark) or UTF-16/32
with a byte-order mark; anything else is refused in one line that names the file."""

from __future__ import annotations

import codecs

from ..errors import ConfigError

_BOMS = ((codecs.BOM_UTF32_LE, "utf-32"), (codecs.BOM_UTF32_BE, "utf-32"), (codecs.BOM_UTF8, "utf-8-sig"),
         (codecs.BOM_UTF16_LE, "utf-16"), (codecs.BOM_UTF16_BE, "utf-16"))


def decode_config(data: bytes, path) -> str:
    """Decode a config file's bytes; a binary file or one in another encoding raises ConfigError.

    The byte-order marks are those of the Unicode Standard (sec. 23.8, "Specials"); YAML 1.2
    (sec. 5.2) allows UTF-8, UTF-16 and UTF-32 streams so marked.  NUL and other characters YAML
    does not allow in a stream are refused by the YAML reader with their position.
    """
    encoding = next((enc for bom, enc in _BOMS if data.startswith(bom)), "utf-8")
    try:
        return data.decode(encoding)
    except UnicodeDecodeError as exc:
        kind = "a binary file" if b"\x00" in data[:1024] else f"not {encoding.upper()} text"
        raise ConfigError(f"{path}: not a YAML config ({kind}: cannot be decoded at byte offset"
                          f" {exc.start})") from None
