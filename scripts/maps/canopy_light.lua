-- Register map of the canopy light sensor (our fictional part). 8-bit
-- pointer, 16-bit little-endian registers: bus.device(0x2B, { width = 16,
-- order = "little", map = require("maps.canopy_light") }).
return {
  ID       = { at = 0x00, access = "ro", reset = 0x1C5A },
  CONTROL  = { at = 0x01, reset = 0x0000, fields = {
               GAIN = { lsb = 0, width = 2, values = { x1 = 0, x4 = 1, x16 = 2, x64 = 3 } },
               ON   = { bit = 4 },
             } },
  VISIBLE  = { at = 0x02, access = "volatile", scale = 0.05, unit = "lx" },
  INFRARED = { at = 0x03, access = "volatile", scale = 0.05, unit = "lx" },
}
