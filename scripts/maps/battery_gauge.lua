-- Register map of the backup battery gauge (our fictional SMBus part,
-- command map in src/sim/gauge.rs): its Read Word commands read as 16-bit
-- little-endian registers, its Read Byte ones as 8-bit.
--   bus.device(0x0B, { width = 16, order = "little", map = require("maps.battery_gauge") })
-- The helper reads without PEC; the smbus functions check it.
local flag = { no = 0, yes = 1 }
return {
  PACK_MV    = { at = 0x01, access = "volatile", scale = 0.001, unit = "V" },
  PACK_MA    = { at = 0x02, access = "volatile", signed = true, unit = "mA", doc = "charging positive" },
  -- Kept in tenths of a kelvin; shown in degrees Celsius.
  CELL_TEMP  = { at = 0x03, access = "volatile", unit = "degC",
                 scale = function(raw) return raw / 10 - 273.15 end,
                 unscale = function(c) return math.floor((c + 273.15) * 10 + 0.5) end },
  CHARGE_PCT = { at = 0x04, width = 8, access = "volatile", unit = "%" },
  CYCLES     = { at = 0x05, access = "ro" },
  STATUS     = { at = 0x06, access = "volatile", fields = {
                 DISCHARGING = { bit = 0, values = flag },
                 FULL        = { bit = 1, values = flag },
                 LOW_CHARGE  = { bit = 2, values = flag },
                 LOW_VOLTAGE = { bit = 3, values = flag },
                 ALARM       = { bit = 4, values = flag, doc = "latched; Send Byte 0x50 clears" },
                 LOCATE      = { bit = 5, values = { off = 0, on = 1 } },
                 PEC_ERROR   = { bit = 6, values = flag },
                 PEC_ON      = { bit = 15, values = { off = 0, on = 1 } },
               } },
  ALARM_PCT  = { at = 0x10, width = 8, reset = 15, unit = "%" },
  ALARM_MV   = { at = 0x11, reset = 10500, scale = 0.001, unit = "V" },
}
