// Physical constants, each stated once with its source. Nothing else in apsides writes
// a physical constant as a literal.
#pragma once

namespace apsides::constants {

// IAU 2015 Resolution B3, nominal solar and planetary conversion constants (SI).
inline constexpr double kGMSun = 1.3271244e20;      // m^3 s^-2, (GM)^N_sun
inline constexpr double kGMJupiter = 1.2668653e17;  // m^3 s^-2, (GM)^N_J
inline constexpr double kGMEarth = 3.986004e14;     // m^3 s^-2, (GM)^N_E
inline constexpr double kRSun = 6.957e8;            // m, R^N_sun (nominal solar radius)
inline constexpr double kRJupiter = 7.1492e7;       // m, R^N_eJ (equatorial)
inline constexpr double kREarth = 6.3781e6;         // m, R^N_eE (equatorial)

// IAU 2012 Resolution B2: the astronomical unit, exact.
inline constexpr double kAu = 149597870700.0;  // m

// Time units (IAU / SI conventions): the day of 86 400 SI seconds, the Julian year.
inline constexpr double kDay = 86400.0;          // s
inline constexpr double kJulianYearDays = 365.25;  // d

inline constexpr double kPi = 3.14159265358979323846;
inline constexpr double kTwoPi = 6.28318530717958647692;

}  // namespace apsides::constants
