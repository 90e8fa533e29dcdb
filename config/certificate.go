package config

import (
	"strings"
	"time"
)

// Certificate is what the calibration certificate names besides the
// bench: its number, the customer, who calibrated and on which day. Every
// key is optional and a report leaves out what is not given; a value for
// one run can come from the environment (PLATEAU_CERTIFICATE_NUMBER …).
type Certificate struct {
	Number   string `mapstructure:"number"`
	Customer string `mapstructure:"customer"`
	Operator string `mapstructure:"operator"`
	Date     string `mapstructure:"date"` // date of calibration, YYYY-MM-DD

	// DateAt is Date, resolved; zero when not given.
	DateAt time.Time `mapstructure:"-"`
}

func (c *Config) resolveCertificate(p *Problems) {
	cert := &c.Certificate
	cert.DateAt = time.Time{}
	if strings.TrimSpace(cert.Date) == "" {
		return
	}
	t, err := time.Parse("2006-01-02", strings.TrimSpace(cert.Date))
	if err != nil {
		p.bad("certificate.date", cert.Date, "must be a date YYYY-MM-DD (the day of calibration)")
		return
	}
	cert.DateAt = t
}
