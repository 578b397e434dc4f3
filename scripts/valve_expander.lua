-- The irrigation valve I/O expander sits on a 10-bit address.
local valves = bus.device(bus.ten(0x2A5))

step("configure")
valves:set(0x02, 0xF0)                     -- DIRECTION: low nibble outputs
check_eq(valves:get(0x02), 0xF0, "direction")

step("open valves 1 and 3")
valves:update(0x01, 0x0F, 0x05)            -- OUTPUT bits 0 and 2
check_eq(valves:get(0x01) & 0x0F, 0x05, "valve outputs")
log("float switches: " .. hex(valves:get(0x00) >> 4))
