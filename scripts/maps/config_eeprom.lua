-- The node's calibration record in the configuration EEPROM (our own
-- layout): 16-bit word address, 8-bit cells, multi-byte values most
-- significant byte first.
--   bus.device(0x50, { pointer = 16, map = require("maps.config_eeprom") })
-- A fresh EEPROM reads 0xFF everywhere: every value names that "blank".
return {
  CAL_MAGIC  = { at = 0x0000, width = 16, values = { blank = 0xFFFF, v1 = 0xCA11 }, doc = "record format" },
  TEMP_TRIM  = { at = 0x0002, width = 16, signed = true, scale = 0.01, unit = "degC",
                 doc = "added to the climate sensor's temperature" },
  HUM_GAIN   = { at = 0x0004, width = 16, scale = 1 / 32768, unit = "x", doc = "humidity gain, Q1.15" },
  -- Light gain is stored as an exponent: 2^(raw / 32), so a byte spans
  -- 1x to 256x evenly on a log scale. Not linear: a function, with its
  -- inverse so scripts can write it in units.
  LIGHT_GAIN = { at = 0x0006, unit = "x",
                 scale = function(raw) return 2 ^ (raw / 32) end,
                 unscale = function(x) return math.floor(math.log(x, 2) * 32 + 0.5) end },
  SERIAL     = { at = 0x0008, width = 32, values = { blank = 0xFFFFFFFF } },
}
