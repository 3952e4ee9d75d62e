# frequency: drawn by specloop from the CSV files in ../series (re-run: gnuplot frequency.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,520 dynamic font 'Helvetica,12' background rgb 'white'; set output 'frequency.svg' } else { set terminal pngcairo size 1200,693 font 'Helvetica,12' background rgb 'white'; set output 'frequency.png' }
  set multiplot layout 2,1 title 'Loop frequency response L(jω) = C(jω)·G(jω)' font ',13'
  set logscale x
  set format x '10^{%L}'
  set xlabel 'ω (rad/s)'
  set key outside right top vertical Left reverse box opaque font ',9' samplen 2 width 2
  unset arrow; unset label
  set ylabel 'magnitude (dB)'
  set arrow from 32.32608207,-30.32087937 to 32.32608207,0 lc rgb '#c26a1b' lw 1.5 heads size screen 0.008,90
  set arrow from 29.72112189,-24.00758883 to 29.72112189,0 lc rgb '#1f5f99' lw 1.5 heads size screen 0.008,90
  plot 0 with lines lc rgb '#999999' dt 2 notitle, \
       '../series/frequency_classical.csv' using 1:2 with lines lc rgb '#c26a1b' lw 2 title 'classical', \
       '../series/frequency_optimized.csv' using 1:2 with lines lc rgb '#1f5f99' lw 2 title 'optimized', \
       NaN with lines lc rgb '#555555' lw 1.5 title 'bars: gain margins at the phase crossovers'
  unset arrow; unset label
  set ylabel 'phase (deg)'
  set arrow from 3.271007171,-180 to 3.271007171,-97.69684382 lc rgb '#c26a1b' lw 1.5 heads size screen 0.008,90
  set arrow from 5.035080194,-180 to 5.035080194,-116.7517171 lc rgb '#1f5f99' lw 1.5 heads size screen 0.008,90
  plot -180 with lines lc rgb '#999999' dt 2 notitle, \
       '../series/frequency_classical.csv' using 1:3 with lines lc rgb '#c26a1b' lw 2 title 'classical', \
       '../series/frequency_optimized.csv' using 1:3 with lines lc rgb '#1f5f99' lw 2 title 'optimized', \
       NaN with lines lc rgb '#555555' lw 1.5 title 'bars: phase margin at the gain crossover'
  unset multiplot
  unset logscale x
  set format x '% h'
  unset output
}
