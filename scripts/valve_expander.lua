-- The irrigation valve I/O expander sits on a 10-bit address.
local valves = bus.device(bus.ten(0x2A5), { map = require("maps.valve_expander") })

step("configure")
valves:set("DIRECTION", 0xF0)              -- low nibble outputs
check_eq(valves:read("DIRECTION.LOW"), "outputs", "direction")

step("open valves 1 and 3")
valves:update("OUTPUT", 0x0F, 0x05)        -- VALVE1 and VALVE3
check_eq(valves:get("OUTPUT") & 0x0F, 0x05, "valve outputs")
log("float switches: " .. hex(valves:read("INPUT.FLOATS")))
