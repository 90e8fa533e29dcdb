package all

// The pressure balance reference (link kind balance).
import _ "plateau/drivers/balance"
