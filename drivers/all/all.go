// Package all links every driver into the program: importing it registers
// each link kind with package drivers.
package all

import (
	_ "plateau/drivers/line"
	_ "plateau/drivers/manual"
	_ "plateau/drivers/modbus"
)
