// Published data sets used as reference checks (sources named beside each).
#pragma once

#include <vector>

namespace testdata {

// NIST/SEMATECH e-Handbook of Statistical Methods, 6.4.3.1 single exponential smoothing example.
inline const std::vector<double> kNist = {71, 70, 69, 68, 64, 65, 72, 78, 75, 75, 75, 70};

// Saudi Arabian oil production 1996-2013, fpp2 `oil` (FPP2 sec. 7.1; also in statsmodels'
// statsmodels/tsa/tests/test_exponential_smoothing.py).
inline const std::vector<double> kOilFpp2 = {
    445.3641, 453.1950, 454.4096, 422.3789, 456.0371, 440.3866, 425.1944, 486.2052, 500.4291,
    521.2759, 508.9476, 488.8889, 509.8706, 456.7229, 473.8166, 525.9509, 549.8338, 542.3405};

// Oil 1996-2007, fpp1 revision, as in statsmodels' tsa/holtwinters/tests/test_holtwinters.py.
inline const std::vector<double> kOilFpp1 = {
    446.65652290000003, 454.47330649999998, 455.66297400000002, 423.63223879999998,
    456.27132790000002, 440.58805009999998, 425.33252010000001, 485.14944789999998,
    506.04816210000001, 526.79198329999997, 514.26888899999994, 494.21101929999998};

// Australian air passengers 1990-2004 (fpp1 ausair), statsmodels' test_holtwinters.py.
inline const std::vector<double> kAirFpp1 = {17.5534,   21.8601,   23.8866,   26.9293,   26.8885,
                                             28.8314,   30.0751,   30.9535,   30.1857,   31.5797,
                                             32.577569, 33.477398, 39.021581, 41.386432, 41.596552};

// International visitor nights in Australia, quarterly 2005-2010 (fpp1 austourists subset),
// statsmodels' test_holtwinters.py `aust`.
inline const std::vector<double> kAust = {
    41.727457999999999, 24.04185,           32.328102999999999, 37.328707999999999,
    46.213152999999998, 29.346326000000001, 36.482909999999997, 42.977719,
    48.901524999999999, 31.180221,          37.717880999999998, 40.420211000000002,
    51.206862999999998, 31.887228,          40.978262999999998, 43.772491000000002,
    55.558566999999996, 33.850915000000001, 42.076383,          45.642291999999998,
    59.766779999999997, 35.191876999999998, 44.319737000000003, 47.913736};

}  // namespace testdata
