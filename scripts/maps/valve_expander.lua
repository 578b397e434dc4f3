-- Register map of the irrigation valve I/O expander (our fictional part)
-- on 10-bit address 0x2A5: 8-bit pointer, 8-bit registers. Pins 0-3
-- drive valves 1-4, pins 4-7 read the float switches.
--   bus.device(bus.ten(0x2A5), { map = require("maps.valve_expander") })
local pins = { outputs = 0, inputs = 15 }
return {
  INPUT     = { at = 0x00, access = "ro", reset = 0xF0, doc = "pin levels", fields = {
                FEEDBACK = { lsb = 0, width = 4, doc = "valve pins as driven" },
                FLOATS   = { lsb = 4, width = 4, doc = "float switches, 1 = dry" },
              } },
  OUTPUT    = { at = 0x01, reset = 0x00, fields = {
                VALVE1 = { bit = 0, values = { closed = 0, open = 1 } },
                VALVE2 = { bit = 1, values = { closed = 0, open = 1 } },
                VALVE3 = { bit = 2, values = { closed = 0, open = 1 } },
                VALVE4 = { bit = 3, values = { closed = 0, open = 1 } },
              } },
  DIRECTION = { at = 0x02, reset = 0xFF, doc = "1 = input", fields = {
                LOW  = { lsb = 0, width = 4, values = pins },
                HIGH = { lsb = 4, width = 4, values = pins },
              } },
}
