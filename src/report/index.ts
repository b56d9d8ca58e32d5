export { CHART_PALETTE, escapeXml, formatTick, niceTicks, renderLineChart } from './svg-chart.ts';
export type {
  ChartBand,
  ChartHLine,
  ChartMarker,
  ChartOptions,
  ChartPoint,
  ChartSeries,
  LineStyle,
  NiceTicks,
} from './svg-chart.ts';
