-- The air monitor on the demo bench is simulated from its register map
-- (scripts/maps/air_monitor.lua), whose Lua hooks are the part's
-- behaviour: a START bit begins a measurement, DRDY sets 4, 8 or 16 ms
-- later on the bus clock, each reading also goes into a four-deep FIFO.
--   buscue run scripts/air_monitor.lua --set mode=fine

local air = bus.device(0x3A, { width = 16, map = require("maps.air_monitor") })

step("identify")
check_eq(air:get("ID"), 0xA1C0, "air monitor ID")

step("one measurement")
air:set("CONTROL", { MODE = param("mode", "normal"), START = 1 })
air:wait_for("STATUS.DRDY", 1, { timeout_ms = 50, interval_ms = 1 })
local co2, unit = air:read("CO2")
check_range(co2, 300, 2000, "CO2 (" .. unit .. ")")
log(string.format("CO2 %.0f %s", co2, unit))

step("a burst into the FIFO")
for _ = 1, 5 do                            -- one more than the FIFO holds
  air:set("CONTROL", { START = 1 })
  air:wait_for("STATUS.DRDY", 1, { timeout_ms = 50 })
end
check_eq(air:read("STATUS.OVER"), 1, "the fifth reading pushed the oldest out")
check_eq(air:read("STATUS.DEPTH"), 4, "four readings wait")
for _ = 1, 4 do air:read("FIFO") end
air:set("STATUS", { OVER = 1 })            -- write 1 to clear
for line in air:explain("STATUS"):gmatch("[^\n]+") do log(line) end
log(string.format("drift %.1f %s", air:read("DRIFT")))
