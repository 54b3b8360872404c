; Invented instance for plansieve's tests (hand-designed, not from a benchmark set).
(define (problem two-parcels)
  (:domain logistics-strips)
  (:objects ashford brindle ash-depot ash-airfield van-ash bri-depot bri-airfield van-bri skylark parcel1 parcel2)
  (:init
    (CITY ashford) (LOCATION ash-depot) (LOCATION ash-airfield) (AIRPORT ash-airfield) (TRUCK van-ash)
    (in-city ash-depot ashford) (in-city ash-airfield ashford) (at van-ash ash-depot)
    (CITY brindle) (LOCATION bri-depot) (LOCATION bri-airfield) (AIRPORT bri-airfield) (TRUCK van-bri)
    (in-city bri-depot brindle) (in-city bri-airfield brindle) (at van-bri bri-depot)
    (AIRPLANE skylark) (at skylark ash-airfield)
    (OBJ parcel1) (at parcel1 ash-depot)
    (OBJ parcel2) (at parcel2 bri-airfield)
  )
  (:goal (and (at parcel1 bri-depot) (at parcel2 ash-depot))))
